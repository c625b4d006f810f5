"""The ``dustrt`` command.  It parses, loads the scenario, calls one library
function, and writes; it holds no physics.  Heavy modules are imported inside
the subcommand handlers so that ``dustrt --help`` is instant.

Exit codes: 0 success, 2 bad input (scenario, data file or option), 1 other.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

DEMO = "demo"


def _load(args, path):
    """The validated scenario; then, on a first run, say why the start is slow."""
    from dustrt.config import load_scenario

    scenario = load_scenario(DEMO if path is None else path)
    _announce_compilation(args)
    return scenario


def _announce_compilation(args) -> None:
    from dustrt.kernel_cache import KERNEL_MODULES, kernels_cached

    needed = ("_mie_kernels",) if args.command == "optics" else KERNEL_MODULES
    if not kernels_cached(needed):
        _say(args, "dustrt: first run: compiling the numerical kernels (15-60 s); later runs reuse them")


def _say(args, message: str) -> None:
    if not getattr(args, "quiet", False):
        print(message, file=sys.stderr)


def _finish(args, ds, figure: str | None = None) -> int:
    """Write the Dataset and, if asked, the named quick-look figure; all or nothing.

    The figure is drawn and rendered to a temporary file first, so a plotting
    problem leaves no netCDF behind; both files are renamed into place at the end.
    """
    from pathlib import Path

    from dustrt import io

    tmp_plot = None
    if figure and getattr(args, "plot", None):
        from dustrt import plots

        tmp_plot = io.render_figure(getattr(plots, figure)(ds), args.plot)
    try:
        io.write_netcdf(ds, args.output)
    except BaseException:
        if tmp_plot:
            Path(tmp_plot).unlink(missing_ok=True)
        raise
    _say(args, f"wrote {args.output}")
    if tmp_plot:
        io.commit(tmp_plot, args.plot)
        _say(args, f"wrote {args.plot}")
    return 0


def _cmd_optics(args) -> int:
    from dustrt.optics import optics_dataset

    sc = _load(args, args.scenario)
    ds = optics_dataset(sc.populations, sc.wavelength_nm, sc.scattering_angle_deg,
                        sc.optics_relative_tolerance,
                        progress=lambda name: _say(args, f"optics: population {name!r}"))
    ds.attrs["scenario"] = sc.text
    ds.attrs["scenario_source"] = sc.source
    return _finish(args, ds, "optics_figure")


def _cmd_limb(args) -> int:
    from dustrt.forward import limb_dataset

    return _finish(args, limb_dataset(_load(args, args.scenario), progress=not args.quiet), "limb_figure")


def _cmd_observe(args) -> int:
    from dustrt.observe import observation_dataset

    sc = _load(args, args.scenario)
    return _finish(args, observation_dataset(sc, realizations=args.realizations, seed=args.seed,
                                             progress=not args.quiet))


def _cmd_separate(args) -> int:
    from dustrt.separate import separate_file

    ds = separate_file(args.observation, _load(args, args.scenario), progress=not args.quiet)
    return _finish(args, ds, "separation_figure")


def _cmd_limit(args) -> int:
    from dustrt.limits import limits_file

    sc = _load(args, args.scenario)
    ds = limits_file(args.observation, sc, method=args.method, progress=not args.quiet)
    size_word = {"monodisperse": "radius", "lognormal": "median radius", "power-law": "smallest radius (power law)"}
    for p in ds["population"].values:
        word = size_word[sc.population(str(p)).size.kind]
        for k in range(ds.sizes["grain_radius"]):
            sel = ds.sel(population=p).isel(grain_radius=k)
            lo, up = float(sel["density_lower_limit_cm3"]), float(sel["density_upper_limit_cm3"])
            what = (f"interval [{lo:.3g}, {up:.3g}]" if int(sel["two_sided"]) else f"upper limit {up:.3g}")
            flag = "" if int(sel["fit_reliable"]) else "  (model does not fit the data: unreliable)"
            swept = "".join(f", {sel[c].attrs['sweep_key']} = {float(sel[c]):g}" for c in sel.coords
                            if "sweep_key" in sel[c].attrs)
            _say(args, f"{p}, {word} {float(sel['radius_um']):.3g} um{swept}: {what} cm-3 at "
                       f"{ds.attrs['confidence']:g} CL, excess {float(sel['dust_excess_significance']):.2f} sigma{flag}")
    return _finish(args, ds, "limits_figure")


def _cmd_sweep(args) -> int:
    from dustrt import io
    from dustrt.sweep import run_sweep

    sc = _load(args, args.scenario)
    ds = run_sweep(sc, args.output, scheduler=args.scheduler, workers=args.workers,
                   resume=args.resume, progress=not args.quiet, overwrite=args.overwrite)
    _say(args, f"wrote {args.output}")
    if args.plot:
        from dustrt import plots

        io.save_figure(plots.sweep_figure(ds), args.plot)
        _say(args, f"wrote {args.plot}")
    return 0


def _cmd_demo(args) -> int:
    from dustrt.demo import check_output_folder, run_demo

    check_output_folder(args.output, args.overwrite)
    _announce_compilation(args)
    run_demo(args.output, overwrite=args.overwrite, progress=not args.quiet, say=lambda m: _say(args, m))
    if not args.quiet:
        print((Path(args.output) / "summary.txt").read_text(encoding="utf-8"))
    return 0


def _count(text: str) -> int:
    """argparse type: an integer >= 0."""
    try:
        v = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"must be an integer >= 0, got {text!r}") from None
    if v < 0:
        raise argparse.ArgumentTypeError(f"must be an integer >= 0, got {v}")
    return v


def _positive(text: str) -> int:
    """argparse type: an integer >= 1."""
    v = _count(text)
    if v < 1:
        raise argparse.ArgumentTypeError(f"must be an integer >= 1, got {v}")
    return v


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="dustrt",
        description="Forward radiative transfer of sunlight scattered by fine dust above the lunar limb: "
                    "grain optics, limb radiance, zodiacal light, instrument noise, dust/zodiacal "
                    "separation, upper limits and detectability sweeps. SCENARIO is a TOML file; "
                    "'demo' (the default where optional) is the packaged demo scenario of an invented orbiter.",
        epilog="Predictions are model results for science planning, not environmental specifications.",
    )
    from dustrt import __version__

    parser.add_argument("--version", action="version", version=f"dustrt {__version__}")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")

    def command(name, func, summary, description, *, inputs, output, plot=None):
        """One subcommand: its inputs ('scenario?', 'scenario', 'observation'), -o, --plot, -q."""
        p = sub.add_parser(name, help=summary, description=description)
        if "observation" in inputs:
            p.add_argument("observation", metavar="OBS.nc", help="calibrated observation file")
            p.add_argument("--scenario", required=True, metavar="SCENARIO", help="scenario TOML with the hypotheses")
        elif "scenario?" in inputs:
            p.add_argument("scenario", nargs="?", default=DEMO, metavar="SCENARIO",
                           help="scenario TOML (default: demo)")
        else:
            p.add_argument("scenario", metavar="SCENARIO", help="scenario TOML")
        p.add_argument("-o", "--output", required=True, metavar=output, help="netCDF file to write")
        if plot:
            p.add_argument("--plot", metavar="FILE.png", help=plot)
        p.add_argument("--overwrite", action="store_true", help="replace existing output files")
        p.add_argument("-q", "--quiet", action="store_true", help="no progress or status messages")
        p.set_defaults(func=func)
        return p

    p = sub.add_parser("demo", help="the whole job on the packaged demo scenario (start here)",
                       description="Optics, limb radiance, zodiacal light, a simulated observation, the "
                                   "dust/zodiacal separation, upper limits from a simulated non-detection and a "
                                   "grain-size sweep for the demo scenario (an invented orbiter, demo values); "
                                   "writes netCDF files, PNG figures and summary.txt into one folder.")
    p.add_argument("-o", "--output", default="dustrt_demo", metavar="DIR",
                   help="folder for the outputs (created if needed; default: dustrt_demo)")
    p.add_argument("--overwrite", action="store_true", help="replace the demo files already in DIR")
    p.add_argument("-q", "--quiet", action="store_true", help="no progress, status messages or summary")
    p.set_defaults(func=_cmd_demo)
    command("optics", _cmd_optics, "size-averaged Mie optics of the scenario's grain populations",
            "Compute cross sections, albedo, asymmetry parameter, phase function and polarisation of each "
            "[[population]] on the scenario's wavelength and angle grids, and write them to netCDF.",
            inputs=("scenario?",), output="OUT.nc", plot="also draw cross sections and phase functions")
    command("limb", _cmd_limb, "limb radiance of the hypothesised dust (the main job)",
            "Integrate the sunlit dust columns along each line of sight and form the spectral radiance "
            "per population and in total.",
            inputs=("scenario?",), output="OUT.nc", plot="also draw limb profiles and spectra")
    p = command("observe", _cmd_observe, "simulated calibrated observations (expected and noisy)",
                "Dust + zodiacal light through the [instrument]: expected counts, noise and, with "
                "--realizations, noisy calibrated spectra.", inputs=("scenario?",), output="OBS.nc")
    p.add_argument("--realizations", type=_count, default=0, metavar="N",
                   help="number of noisy realisations (0: expected values only)")
    p.add_argument("--seed", type=_count, default=None, metavar="S",
                   help="random seed, an integer >= 0 (reproducible noise)")
    command("separate", _cmd_separate, "separate dust from zodiacal light by colour",
            "Fit each observed spectrum with zodiacal light plus the dust template of each hypothesised "
            "population (weighted least squares).",
            inputs=("observation",), output="RESULT.nc", plot="also draw data, components and residuals")
    p = command("limit", _cmd_limit, "upper limits on grain density from a non-detection",
                "Feldman-Cousins (default) or flat-prior Bayesian limits on each population's density "
                "normalisation, per spectrum, per observation and joint.",
                inputs=("observation",), output="LIMITS.nc", plot="also draw the limit vs grain radius")
    p.add_argument("--method", choices=("feldman-cousins", "bayesian-flat"), default=None,
                   help="interval construction (default: the scenario's [limits] method)")
    p = command("sweep", _cmd_sweep, "minimum detectable density over a parameter grid",
                "Sweep grain radius and/or any numeric scenario key ([sweep] table) and compute the minimum "
                "detectable density, in chunks on dask.",
                inputs=("scenario",), output="SWEEP.nc", plot="also draw the minimum detectable density")
    g = p.add_mutually_exclusive_group()
    g.add_argument("--scheduler", metavar="ADDRESS", help="address of an existing dask.distributed scheduler")
    g.add_argument("--workers", type=_positive, metavar="N", help="local cluster size (default: serial in-process)")
    p.add_argument("--resume", action="store_true", help="reuse finished chunks of an interrupted sweep")
    parser._dustrt_commands = dict(sub.choices)
    return parser


def _check_outputs(args) -> None:
    """Before any work: outputs can be created, are not the inputs, and exist only with --overwrite."""
    from dustrt import io

    if args.command == "demo":
        return  # a folder of outputs, checked by the demo itself
    outputs = [("output", args.output)] + ([("--plot", args.plot)] if getattr(args, "plot", None) else [])
    inputs = [(n, getattr(args, n, None)) for n in ("scenario", "observation")]
    if len(outputs) == 2 and Path(args.plot).resolve() == Path(args.output).resolve():
        raise ValueError(f"--plot {args.plot}: is the same file as the output")
    for what, name in outputs:
        for input_name, value in inputs:
            if value not in (None, DEMO) and Path(value).resolve() == Path(name).resolve():
                raise ValueError(f"{what} {name}: is the input {input_name} file; choose another name")
        io.check_output_path(name, what)
        if what == "--plot":
            io.check_figure_format(name)
        if Path(name).exists() and not args.overwrite:
            raise ValueError(f"{what} {name}: already exists; choose another name or pass --overwrite")


def main(argv=None) -> int:
    from dustrt.chunks import ChunkError  # light: imports no dask

    parser = build_parser()
    args, unknown = parser.parse_known_args(argv)
    if unknown:  # reported by the subcommand, so the message names it ("dustrt limb: error: ...")
        parser._dustrt_commands[args.command].error(f"unrecognized arguments: {' '.join(unknown)}")
    import warnings

    from dustrt import use_plain_warnings

    previous_format = use_plain_warnings(args.command)
    try:
        _check_outputs(args)
        return args.func(args)
    except ChunkError as exc:
        # a grid point failed: bad input if its cause is a validation error
        cause = exc.__cause__
        if isinstance(cause, ValueError):
            print(f"dustrt {args.command}: error: {cause} (finished chunks are kept; rerun with --resume)",
                  file=sys.stderr)
            return 2
        raise
    except UnicodeDecodeError as exc:
        print(f"dustrt {args.command}: error: input is not UTF-8 text ({exc.reason})", file=sys.stderr)
        return 2
    except (ValueError, OSError) as exc:
        # bad input: scenario/data validation errors are ValueErrors with file and key.
        # DUSTRT_TRACEBACK=1 shows where one came from (for reports of a suspected bug).
        import os

        if os.environ.get("DUSTRT_TRACEBACK"):
            raise
        print(f"dustrt {args.command}: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("dustrt: interrupted", file=sys.stderr)
        return 130
    finally:
        warnings.formatwarning = previous_format


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
