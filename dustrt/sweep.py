"""Detectability sweeps: minimum detectable density over a parameter grid.

For every grid point and population, the expected (noise-free, "Asimov") colour
fit of zodiacal light [+ colour slope] + dust template gives the marginal
uncertainty σ_n of the dust density normalisation from the covariance of the
weighted least-squares problem (the same solver as ``dustrt separate``), with
the noise of the dust-free sky (the significance of an excess is judged under
the null hypothesis of no dust).  All limb lines of sight of the scan are
combined (inverse-variance, each with its own zodiacal nuisance terms; views
ending on the surface are left out as in the separation), and

    n_min = detection_sigma · σ_n        [cm⁻³]

so n_min is linear in the threshold, scales as 1/C_sca (∝ a⁻⁶ in the Rayleigh
regime) and as t^(−1/2) in the photon-noise limit.

Work is re-used as DESIGN.md prescribes: population optics are cached per grain
size (:func:`dustrt.optics.population_optics`), sunlit columns per geometry and
profile (:func:`dustrt.forward.compute_columns`).  Grid chunks run serially,
on a local dask cluster or on an existing scheduler (:mod:`dustrt.chunks`),
with per-chunk checkpoints for ``--resume``.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
from pathlib import Path

import numpy as np

from dustrt.density import reference_density_cm3
from dustrt.sizes import mean_volume_um3

OUTPUT_KEYS = ("minimum_detectable_density_cm3", "minimum_detectable_volume_density_um3_cm3",
               "snr_per_unit_density", "colour_ratio_dust", "colour_ratio_zodiacal")


def dimension_name(key: str) -> str:
    """netCDF-friendly dimension name of a swept key ('observer.local_time_h' -> 'observer__local_time_h')."""
    return key.replace(".", "__")


def refuse_common_radius_in_joint_fit(scenario, axes) -> None:
    """A radius_um sweep gives every population the same radius: their templates become (nearly)
    proportional, which a joint fit cannot separate."""
    if scenario.separation.joint_fit and len(scenario.populations) > 1 and any(k == "radius_um" for k, _ in axes):
        raise ValueError(f"{scenario.source}: key 'sweep.radius_um': gives every population the same radius, which "
                         "makes a joint fit degenerate; sweep 'population.NAME.size.radius_um' (or "
                         "median_radius_um) instead")


def scenario_at(spec, values: dict):
    from dustrt.config import scenario_from_dict, with_values

    plain = {k: v for k, v in values.items() if k != "radius_um"}
    raw = with_values(spec["raw"], plain) if plain else spec["raw"]
    sc = scenario_from_dict(raw, source=spec["source"], base_dir=Path(spec["base_dir"]), text=spec["text"])
    if "radius_um" in values:
        pops = tuple(dataclasses.replace(p, size=p.size.with_radius(values["radius_um"])) for p in sc.populations)
        sc = dataclasses.replace(sc, populations=pops)
    return sc


def detectability(scenario, detection_sigma: float):
    """Minimum detectable density and related figures for one scenario; arrays over populations."""
    from dustrt.instrument import expected_counts
    from dustrt.observe import binned_limb
    from dustrt.separate import (colour_ratio, design_matrix, fit_mask, fit_spectra, joint_fit_spectra,
                                 zodiacal_parameter_count)

    scenario.require("limb", "instrument")
    inst = scenario.instrument.instrument
    b = binned_limb(scenario, extinction=False)
    wl = b.bin_centres_nm
    background = b.zodiacal_radiance + b.surface_radiance  # (L, B) dust-free sky
    sigma = expected_counts(background, wl, inst).radiance_uncertainty
    use = fit_mask(scenario, wl)[None, :] & np.isfinite(sigma) & (sigma > 0)
    hits = np.asarray(b.limb.columns.hits_surface, dtype=bool)
    sep = scenario.separation
    out = {k: [] for k in OUTPUT_KEYS}
    zod_sum = b.zodiacal_radiance.sum(axis=0)

    def fit_covariance(dust):
        # Expected covariance of the fit (data values do not enter it).  The same solver as
        # the separation: views that end on the surface (no zodiacal light there, surface not
        # modelled) or whose dust and zodiacal templates are degenerate come back NaN and are
        # left out, exactly as `dustrt separate` and `dustrt limit` leave them out.
        x = design_matrix(b.zodiacal_radiance, dust, wl, sep.colour_order)  # (L, K, B)
        return fit_spectra(np.zeros(x.shape[:1] + x.shape[-1:]), np.where(use, sigma, 1.0), x,
                           use & ~hits[:, None], nonnegative=False)[1]

    if sep.joint_fit:  # every population's amplitude profiled over the others'
        k0 = zodiacal_parameter_count(scenario)
        joint_cov = joint_fit_spectra(np.zeros(b.zodiacal_radiance.shape), np.where(use, sigma, 1.0),
                                      b.zodiacal_radiance, b.population_radiance, wl, sep.colour_order,
                                      use & ~hits[:, None], nonnegative=False)[1]
    for p, pop in enumerate(scenario.populations):
        dust = b.population_radiance[p]  # (L, B) at the hypothesised density
        var_amp = joint_cov[:, k0 + p, k0 + p] if sep.joint_fit else fit_covariance(dust)[:, -1, -1]
        ok = np.isfinite(var_amp) & (var_amp > 0) & ~hits
        inv = np.where(ok, 1.0 / np.where(ok, var_amp, 1.0), 0.0).sum()
        n0 = reference_density_cm3(pop.density)
        sigma_n = n0 / np.sqrt(inv) if inv > 0 else np.inf
        out["minimum_detectable_density_cm3"].append(detection_sigma * sigma_n)
        # grain volume per unit volume of space: what a size sweep trades (mass loading / bulk density)
        out["minimum_detectable_volume_density_um3_cm3"].append(detection_sigma * sigma_n
                                                                 * mean_volume_um3(pop.size))
        out["snr_per_unit_density"].append(1.0 / sigma_n)
        out["colour_ratio_dust"].append(colour_ratio(dust.sum(axis=0), b.solar_irradiance, wl,
                                                     sep.blue_band_nm, sep.red_band_nm))
        out["colour_ratio_zodiacal"].append(colour_ratio(zod_sum, b.solar_irradiance, wl,
                                                         sep.blue_band_nm, sep.red_band_nm))
    return {k: np.asarray(v, dtype=float) for k, v in out.items()}


def grid_values(axes, flat_index: int) -> dict:
    shape = tuple(len(v) for _, v in axes)
    idx = np.unravel_index(flat_index, shape)
    return {key: float(values[i]) for (key, values), i in zip(axes, idx)}


def _in_dask_worker() -> bool:
    import sys

    if "distributed" not in sys.modules:  # never imported: serial, in-process
        return False
    try:
        sys.modules["distributed"].get_worker()
    except ValueError:
        return False
    return True


def compute_chunk(spec, indices):
    """Picklable chunk function for :func:`dustrt.chunks.run_chunked`."""
    if _in_dask_worker():  # its warnings print in the worker: make them the CLI's plain lines too
        from dustrt import use_plain_warnings

        use_plain_warnings("sweep")
    rows = {k: [] for k in OUTPUT_KEYS}
    for i in np.asarray(indices):
        sc = scenario_at(spec, grid_values(spec["axes"], int(i)))
        res = detectability(sc, spec["detection_sigma"])
        for k in OUTPUT_KEYS:
            rows[k].append(res[k])
    return {k: np.array(v, dtype=float) for k, v in rows.items()}


def sweep_spec(scenario) -> dict:
    if scenario.sweep is None:
        raise ValueError(f"{scenario.source}: key 'sweep': table is required for a sweep")
    scenario.require("limb", "instrument")
    return {"raw": scenario.raw, "source": scenario.source, "base_dir": str(scenario.base_dir),
            "text": scenario.text, "axes": [(k, np.asarray(v, dtype=float)) for k, v in scenario.sweep.axes],
            "detection_sigma": scenario.sweep.detection_sigma}


def fingerprint(spec) -> str:
    import dustrt

    h = hashlib.sha256()
    h.update(dustrt.__version__.encode())
    h.update(json.dumps(spec["raw"], sort_keys=True, default=str).encode())
    for k, v in spec["axes"]:
        h.update(k.encode())
        h.update(np.ascontiguousarray(v).tobytes())
    h.update(repr(spec["detection_sigma"]).encode())
    return h.hexdigest()


def run_sweep(scenario, output_path, scheduler=None, workers=None, resume=False, progress=False,
              overwrite=False):
    """Run the scenario's [sweep], write the result atomically to ``output_path`` and return it.

    Finished chunks of an interrupted sweep (``OUTPUT.chunks/``) are reused with ``resume``;
    without it they are discarded only with ``overwrite`` (otherwise this refuses to start).
    """
    from dustrt import io
    from dustrt.chunks import completed_chunks, remove_checkpoints, run_chunked

    spec = sweep_spec(scenario)
    refuse_common_radius_in_joint_fit(scenario, spec["axes"])
    # validate every grid point's scenario up front (parsing only, ~1 ms each), so a bad
    # swept value or combination fails fast, naming the keys, before any work is done
    from dustrt.separate import check_bands, check_hypotheses

    shape = tuple(len(v) for _, v in spec["axes"])
    n_points = int(np.prod(shape))
    bad: dict[str, list[str]] = {}  # problem -> grid points that have it
    for i in range(n_points):
        values = grid_values(spec["axes"], i)
        try:
            sc = scenario_at(spec, values)
            check_hypotheses(sc, "dustrt sweep")
            check_bands(sc, sc.instrument.instrument.bin_centres_nm, "the instrument")
        except ValueError as exc:
            point = ", ".join(f"{k} = {v:g}" for k, v in values.items())
            for problem in getattr(exc, "problems", [str(exc)]):
                bad.setdefault(problem, []).append(point)
    if bad:
        lines = [f"{problem} (at {len(points)} grid point(s), e.g. {points[0]})" for problem, points in bad.items()]
        n_bad = len({p for points in bad.values() for p in points})
        raise ValueError(f"{scenario.source}: key 'sweep': {n_bad} of {n_points} grid points give an invalid "
                         "scenario:\n  " + "\n  ".join(lines))
    output_path = Path(output_path)
    ckdir = output_path.with_name(output_path.name + ".chunks")
    if not resume and not overwrite and ckdir.is_dir() and completed_chunks(ckdir):
        raise ValueError(f"{ckdir}: holds {len(completed_chunks(ckdir))} finished chunk(s) of an interrupted sweep; "
                         "pass --resume to reuse them, or --overwrite to start over")
    res = run_chunked(compute_chunk, spec, n_points, ckdir,
                      chunk_size=scenario.sweep.chunk_size or None, scheduler=scheduler, workers=workers,
                      resume=resume, progress=progress, fingerprint=fingerprint(spec))
    ds = sweep_dataset(scenario, spec, res)
    io.write_netcdf(ds, output_path)
    remove_checkpoints(ckdir)
    return ds


def sweep_dataset(scenario, spec, res):
    import xarray as xr

    import dustrt

    axes = spec["axes"]
    shape = tuple(len(v) for _, v in axes)
    dims = tuple(dimension_name(k) for k, _ in axes)
    names = [p.name for p in scenario.populations]

    def arrange(a):  # (N, P) -> (P, *shape)
        return np.moveaxis(a.reshape(shape + (len(names),)), -1, 0)

    coords = {"population": ("population", names, {"long_name": "grain population"})}
    for (key, values), d in zip(axes, dims):
        units = key.rsplit("_", 1)[-1] if "_" in key else "1"
        coords[d] = (d, values, {"long_name": f"swept scenario key {key}", "sweep_key": key,
                                 "units": {"um": "um", "km": "km", "h": "hour", "s": "s", "deg": "degree",
                                           "cm3": "cm-3", "nm": "nm", "au": "au"}.get(units, "1")})
    pd = ("population",) + dims
    ds = xr.Dataset(
        {
            "minimum_detectable_density_cm3": (pd, arrange(res["minimum_detectable_density_cm3"]),
                                               {"units": "cm-3", "long_name": f"density normalisation whose expected (noise-free) dust excess after "
                                                f"the colour separation is {spec['detection_sigma']:g} sigma (about 50 % "
                                                "detection probability at that threshold)"}),
            "minimum_detectable_volume_density_um3_cm3": (
                pd, arrange(res["minimum_detectable_volume_density_um3_cm3"]),
                {"units": "um3 cm-3", "long_name": "grain volume per unit volume of space at the minimum "
                 "detectable density (times the grains' bulk density: the detectable mass loading)"}),
            "snr_per_unit_density": (pd, arrange(res["snr_per_unit_density"]),
                                     {"units": "cm3", "long_name": "expected dust excess significance per unit density normalisation"}),
            "colour_ratio_dust": (pd, arrange(res["colour_ratio_dust"]),
                                  {"units": "1", "long_name": "blue/red ratio of the solar-normalised dust radiance"}),
            "colour_ratio_zodiacal": (pd, arrange(res["colour_ratio_zodiacal"]),
                                      {"units": "1", "long_name": "blue/red ratio of the solar-normalised zodiacal light"}),
        },
        coords=coords,
        attrs={"title": "dustrt detectability sweep", "dustrt_version": dustrt.__version__,
               "detection_sigma": spec["detection_sigma"], "scenario": scenario.text,
               "swept_keys": ", ".join(k for k, _ in axes),
               "noise_model": "expected noise of the dust-free sky (zodiacal light, stray light, dark, read noise)",
               "note": "model predictions for science planning; not a safety specification"},
    )
    return ds
