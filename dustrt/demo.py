"""The whole job on the packaged demo scenario, end to end, into one folder.

Each step is the same library call a user's command makes, in the order of a
study: optics -> limb radiance -> simulated observation -> separation -> an
upper limit from a simulated non-detection -> a grain-size sweep.  Every file
is written atomically; existing files are kept unless ``overwrite``.

The demo scenario describes an invented orbiter with invented numbers.
"""

from __future__ import annotations

import dataclasses
import time
from pathlib import Path

import numpy as np

#: file name -> what it holds (also the README's list of demo outputs)
OUTPUTS = {
    "optics.nc": "size-averaged Mie optics of the demo grain populations",
    "optics.png": "cross sections and phase functions",
    "limb.nc": "limb radiance of the hypothesised dust, zodiacal light and columns per line of sight",
    "limb.png": "limb profiles and spectra",
    "observation.nc": "simulated calibrated observation of the hypothesised dusty sky (expected values and one noisy "
                      "realisation)",
    "separation.nc": "dust/zodiacal separation of that observation, per hypothesis and line of sight",
    "separation.png": "observed spectrum, fitted components and residuals",
    "quiet_sky_observation.nc": "simulated observation of the same sky without dust (a non-detection)",
    "limits.nc": "upper limits on each population's density from the non-detection, versus grain radius",
    "limits.png": "the upper limits versus grain radius",
    "sweep.nc": "minimum detectable density and grain volume density versus grain radius",
    "sweep.png": "detectability versus grain radius",
    "summary.txt": "what was computed and the headline numbers",
}

SWEEP_CHECKPOINTS = "sweep.nc.chunks"  # left by an interrupted demo sweep; replaced like the outputs
SEED = 20261202  # fixed: the demo's noise is reproducible
HEADLINE_ALTITUDE_KM = 10.0
HEADLINE_WAVELENGTH_NM = 400.0


def quiet_sky(scenario):
    """The same scenario with every population's density set to zero."""
    pops = tuple(dataclasses.replace(p, density=dataclasses.replace(p.density, **_zero_density(p.density)))
                 for p in scenario.populations)
    return dataclasses.replace(scenario, populations=pops)


def _zero_density(profile) -> dict:
    fields = {f.name for f in dataclasses.fields(profile)}
    return {"scale": 0.0} if "scale" in fields else {"surface_density_cm3": 0.0}


def check_output_folder(out_dir, overwrite: bool) -> Path:
    """Create the folder if needed; refuse (before any work) to replace demo files unless ``overwrite``."""
    out = Path(out_dir)
    if out.exists() and not out.is_dir():
        raise ValueError(f"output folder {out}: exists and is not a folder")
    if not out.parent.is_dir():
        raise ValueError(f"output folder {out}: parent folder {out.parent} does not exist")
    present = [name for name in (*OUTPUTS, SWEEP_CHECKPOINTS) if (out / name).exists()]
    if present and not overwrite:
        raise ValueError(f"output folder {out}: already holds {', '.join(present)}; choose another folder "
                         "or pass --overwrite")
    out.mkdir(exist_ok=True)
    return out


def run_demo(out_dir, *, overwrite: bool = False, progress: bool = True, say=print) -> dict:
    """Run every step on the demo scenario, write the files of :data:`OUTPUTS`; return the headlines."""
    from dustrt import io, plots
    from dustrt.config import load_scenario
    from dustrt.forward import limb_dataset
    from dustrt.limits import limits_file
    from dustrt.observe import observation_dataset
    from dustrt.optics import optics_dataset
    from dustrt.separate import separate_file
    from dustrt.sweep import run_sweep

    out = check_output_folder(out_dir, overwrite)
    t0 = time.perf_counter()
    sc = load_scenario("demo")
    steps = 6

    def step(k, text):
        say(f"demo [{k}/{steps}] {text}")

    def write(ds, name, figure=None):
        io.write_netcdf(ds, out / name)
        if figure is not None:
            io.save_figure(getattr(plots, figure)(ds), out / name.replace(".nc", ".png"))

    step(1, "grain optics")
    optics = optics_dataset(sc.populations, sc.wavelength_nm, sc.scattering_angle_deg, sc.optics_relative_tolerance)
    optics.attrs["scenario"] = sc.text
    write(optics, "optics.nc", "optics_figure")

    step(2, "limb radiance of the hypothesised dust")
    limb = limb_dataset(sc, progress=progress)
    write(limb, "limb.nc", "limb_figure")

    step(3, "simulated observation of the hypothesised sky and dust/zodiacal separation")
    write(observation_dataset(sc, realizations=1, seed=SEED, progress=progress), "observation.nc")
    separation = separate_file(out / "observation.nc", sc, progress=progress)
    write(separation, "separation.nc", "separation_figure")

    step(4, "upper limits from a simulated non-detection (the same sky without dust)")
    write(observation_dataset(quiet_sky(sc), realizations=1, seed=SEED + 1, progress=progress),
          "quiet_sky_observation.nc")
    limits = limits_file(out / "quiet_sky_observation.nc", sc, progress=progress)
    write(limits, "limits.nc", "limits_figure")
    # the headline: the limit for the hypothesis itself (its own grain sizes, no radius sweep)
    own_limits = limits_file(out / "quiet_sky_observation.nc", dataclasses.replace(sc, sweep=None))

    step(5, "detectability versus grain radius")
    sweep_ds = run_sweep(sc, out / "sweep.nc", progress=progress, overwrite=overwrite)
    io.save_figure(plots.sweep_figure(sweep_ds), out / "sweep.png")

    step(6, "summary")
    headlines = headline_numbers(sc, limb, separation, limits, sweep_ds, own_limits)
    text = summary_text(sc, out, headlines, time.perf_counter() - t0)
    io.write_text(text, out / "summary.txt")
    return headlines


def headline_numbers(scenario, limb, separation, limits, sweep_ds, own_limits) -> dict:
    """The numbers a reader looks for first (see :func:`summary_text`)."""
    from dustrt.density import reference_density_cm3

    h = {"hypothesis": {p.name: (p.size.characteristic_radius_um, reference_density_cm3(p.density))
                        for p in scenario.populations}}
    los = int(np.argmin(np.abs(limb["tangent_altitude_km"].values - HEADLINE_ALTITUDE_KM)))
    at = dict(line_of_sight=los)
    wl = dict(wavelength_nm=HEADLINE_WAVELENGTH_NM)
    h["tangent_altitude_km"] = float(limb["tangent_altitude_km"][los])
    h["wavelength_nm"] = HEADLINE_WAVELENGTH_NM
    h["dust_radiance"] = float(limb["radiance"].isel(at).interp(wl))
    h["zodiacal_radiance"] = float(limb["zodiacal_radiance"].isel(at).interp(wl))
    h["population_radiance"] = {str(p): float(limb["population_radiance"].sel(population=p).isel(at).interp(wl))
                                for p in limb["population"].values}
    h["separation"] = {}
    for p in separation["population"].values:
        sel = separation.sel(population=p).isel(observation=0, **at)
        h["separation"][str(p)] = (float(sel["dust_excess_significance"]), float(sel["dust_amplitude"]),
                                   float(sel["dust_amplitude_uncertainty"]),
                                   float(separation["median_reduced_chi2"].sel(population=p)))
    h["confidence"] = float(limits.attrs["confidence"])
    h["upper_limit_cm3"], h["headline_limit"] = {}, {}
    for p in limits["population"].values:
        sel = limits.sel(population=p)
        rows = [(float(r), float(u), bool(ok)) for r, u, ok in zip(
            sel["radius_um"].values, sel["density_upper_limit_cm3"].values, sel["fit_reliable"].values)]
        h["upper_limit_cm3"][str(p)] = rows
        own = own_limits.sel(population=p).isel(grain_radius=0)
        h["headline_limit"][str(p)] = (float(own["radius_um"]), float(own["density_upper_limit_cm3"]),
                                       bool(own["fit_reliable"]))
    h["best_radius_um"] = {}
    for p in sweep_ds["population"].values:
        vol = sweep_ds["minimum_detectable_volume_density_um3_cm3"].sel(population=p)
        k = int(np.nanargmin(vol.values))
        h["best_radius_um"][str(p)] = (float(sweep_ds["radius_um"][k]), float(vol[k]),
                                       float(sweep_ds["minimum_detectable_density_cm3"].sel(population=p)[k]))
    h["detection_sigma"] = float(sweep_ds.attrs["detection_sigma"])
    return h


def summary_text(scenario, out: Path, h: dict, seconds: float) -> str:
    import dustrt

    lines = [
        f"dustrt {dustrt.__version__} demo: the whole job on the packaged demo scenario",
        "DEMO VALUES: an invented orbiter with an invented spectrometer, not a real mission or measurement.",
        "Model predictions for science planning, not environmental or safety specifications.",
        f"scenario: {scenario.source}",
        f"output folder: {out.resolve()}",
        f"run time: {seconds:.1f} s",
        "",
        "Files",
    ]
    lines += [f"  {name:<26} {what}" for name, what in OUTPUTS.items()]
    lines += ["", "Hypothesis (demo values)"]
    lines += [f"  {p:<14} radius {r:.3g} um, density normalisation {n:.3g} cm-3"
              for p, (r, n) in h["hypothesis"].items()]
    lines += [
        "",
        f"Limb radiance at {h['tangent_altitude_km']:g} km tangent altitude, {h['wavelength_nm']:g} nm "
        "[W m-2 sr-1 nm-1]",
        f"  dust + zodiacal light          {h['dust_radiance'] + h['zodiacal_radiance']:.3e}",
        f"  zodiacal light                 {h['zodiacal_radiance']:.3e}",
        f"  dust, all populations          {h['dust_radiance']:.3e}",
    ]
    lines += [f"  dust population {p:<14} {v:.3e}" for p, v in h["population_radiance"].items()]
    lines += ["", f"Separation of the simulated observation of that sky at {h['tangent_altitude_km']:g} km "
                  "(one noisy realisation)"]
    for p, (sig, amp, err, chi2) in h["separation"].items():
        lines.append(f"  {p:<14} dust excess {sig:.1f} sigma; amplitude {amp:.2f} +- {err:.2f} of the hypothesis; "
                     f"median reduced chi-square {chi2:.2f}")
    lines += ["", f"Upper limit from the simulated non-detection ({h['confidence']:.0%} CL, all lines of sight)"]
    for p, (r, u, ok) in h["headline_limit"].items():
        lines.append(f"  {p:<14} {u:.3g} cm-3 for the hypothesis itself (radius {r:.3g} um; hypothesised "
                     f"{h['hypothesis'][p][1]:.3g} cm-3)" + ("" if ok else "   (model does not fit: unreliable)"))
    lines += ["  versus grain radius:", "  population     grain radius [um]   density upper limit [cm-3]"]
    for p, rows in h["upper_limit_cm3"].items():
        for r, u, ok in rows:
            lines.append(f"  {p:<14} {r:>17.3g}   {u:.3g}" + ("" if ok else "   (model does not fit: unreliable)"))
    lines += ["", f"Detectability ({h['detection_sigma']:g} sigma, expected noise of the dust-free sky)",
              "  population     most detectable radius [um]   grain volume density [um3 cm-3]   density [cm-3]"]
    for p, (r, vol, n) in h["best_radius_um"].items():
        lines.append(f"  {p:<14} {r:>27.3g}   {vol:>31.3g}   {n:.3g}")
    lines += ["  (most detectable: the smallest detectable grain volume, i.e. mass loading, over the swept radii)",
              "", "Variables and units of every file: docs/outputs.md in the repository."]
    return "\n".join(lines) + "\n"


def describe_outputs(out_dir) -> str:
    """Markdown: every demo file, and every variable of its netCDF files with dimensions and units."""
    import xarray as xr

    out = Path(out_dir)
    lines = ["# dustrt demo outputs", "",
             "Generated by `python -m dustrt.demo docs/outputs.md` from a run of `dustrt demo`; a test keeps it",
             "in step with the code. Units follow the UDUNITS spelling used in the files' `units` attributes",
             "(`1`: dimensionless). Coordinates without units are labels or indices.", ""]
    for name, what in OUTPUTS.items():
        lines += [f"## `{name}`", "", what[0].upper() + what[1:] + ".", ""]
        if not name.endswith(".nc"):
            continue
        with xr.open_dataset(out / name, engine="h5netcdf") as ds:
            lines += ["| variable | dimensions | units | meaning |", "|---|---|---|---|"]
            for kind, names in (("coordinate", list(ds.coords)), ("data", list(ds.data_vars))):
                for v in names:
                    var = ds[v]
                    dims = ", ".join(var.dims)
                    meaning = var.attrs.get("long_name", "")
                    if kind == "coordinate":
                        meaning = f"(coordinate) {meaning}".rstrip()
                    lines.append(f"| `{v}` | {dims} | {var.attrs.get('units', '')} | {meaning} |")
        lines.append("")
    return "\n".join(lines)


def main(argv=None) -> int:
    """``python -m dustrt.demo FILE.md``: run the demo in a temporary folder and write :func:`describe_outputs`."""
    import sys
    import tempfile

    from dustrt import io

    args = sys.argv[1:] if argv is None else argv
    if len(args) != 1:
        print("usage: python -m dustrt.demo FILE.md", file=sys.stderr)
        return 2
    with tempfile.TemporaryDirectory() as tmp:
        run_demo(Path(tmp) / "demo", progress=False, say=lambda m: None)
        io.write_text(describe_outputs(Path(tmp) / "demo"), args[0])
    return 0


if __name__ == "__main__":  # pragma: no cover
    raise SystemExit(main())
