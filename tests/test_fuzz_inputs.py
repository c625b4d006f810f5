"""Fuzz-style bad input for every command: malformed scenarios, data tables, observations and options.

Every case must end cleanly: exit code 2 with one or more lines on stderr starting with
``dustrt COMMAND: error:`` that name the offending file (and key or variable), no traceback
and no output left behind -- or exit code 0 when a mutation happens to be valid.  An
exception escaping ``dustrt.cli.main`` is a defect.

Mutations are generated systematically from a small, fast base scenario (every key path of
the parsed base dictionary x every mutation kind) plus a seeded random sample of combined
mutations.  Outputs always go to fresh names (existing outputs may be refused).
"""

from __future__ import annotations

import copy
import json
import math
import random
import re
import tomllib
import warnings
from pathlib import Path

import numpy as np
import pytest
import xarray as xr

from dustrt import DustrtWarning
from dustrt.cli import main

COMMANDS = ("optics", "limb", "observe", "separate", "limit", "sweep")
RADIANCE_UNITS = "W m-2 sr-1 nm-1"

# A small, fast scenario: 22 wavelengths, 2 lines of sight, one monodisperse population,
# a coarse instrument, and a sweep over two radii.  Each command runs in ~0.1 s once compiled.
BASE = {
    "wavelengths": {"start_nm": 300.0, "stop_nm": 720.0, "step_nm": 20.0},
    "optics": {"scattering_angles_deg": [0.0, 90.0, 180.0], "relative_tolerance": 1e-3},
    "body": {"radius_km": 1737.4},
    "sun": {"distance_au": 1.0, "spectrum": "builtin"},
    "observer": {"altitude_km": 40.0, "latitude_deg": 0.0, "local_time_h": 5.6},
    "view": {"tangent_altitudes_km": [3.0, 10.0], "azimuth_deg": 0.0},
    "integration": {"top_altitude_km": 200.0, "relative_tolerance": 1e-4, "extinction": False},
    "background": {"zodiacal_light": True, "zodiacal_scale": 1.0, "dark_surface_radiance_factor": 0.0},
    "population": [{
        "name": "fine",
        "material": "mare_basaltic_analogue",
        "size": {"distribution": "monodisperse", "radius_um": 0.08},
        "density": {"profile": "exponential", "surface_density_cm3": 1e-7, "scale_height_km": 10.0},
    }],
    "instrument": {
        "aperture_area_cm2": 20.0, "field_of_view_deg": 0.2, "integration_time_s": 10.0, "frames": 2,
        "bin_width_nm": 20.0, "resolution_fwhm_nm": 20.0, "wavelength_min_nm": 360.0,
        "wavelength_max_nm": 660.0, "throughput": 0.1, "read_noise_e": 10.0, "dark_current_e_s": 1.0,
    },
    "separation": {"blue_band_nm": [380.0, 450.0], "red_band_nm": [600.0, 660.0],
                   "mask_nm": [[585.0, 595.0]], "free_colour_slope": False},
    "limits": {"confidence": 0.9, "method": "feldman-cousins"},
    "sweep": {"radius_um": [0.05, 0.1], "detection_sigma": 5.0},
}


# ------------------------------------------------------------------ TOML writing


def _key(k: str) -> str:
    return k if re.fullmatch(r"[A-Za-z0-9_-]+", k) else json.dumps(k)


def _value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, str):
        return json.dumps(v)
    if isinstance(v, list):
        return "[" + ", ".join(_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{_key(k)} = {_value(x)}" for k, x in v.items()) + " }"
    raise TypeError(type(v))


def dumps(d: dict) -> str:
    """Minimal TOML writer: plain keys first, then [tables] and [[arrays of tables]]."""
    plain, tables, arrays = [], [], []
    for k, v in d.items():
        if isinstance(v, dict):
            tables.append((k, v))
        elif isinstance(v, list) and v and all(isinstance(x, dict) for x in v):
            arrays.append((k, v))
        else:
            plain.append(f"{_key(k)} = {_value(v)}")
    out = plain[:]
    for k, v in tables:
        out += ["", f"[{_key(k)}]"] + [f"{_key(a)} = {_value(b)}" for a, b in v.items()]
    for k, items in arrays:
        for item in items:
            out += ["", f"[[{_key(k)}]]"] + [f"{_key(a)} = {_value(b)}" for a, b in item.items()]
    return "\n".join(out) + "\n"


# ------------------------------------------------------------------ running the CLI


def run_cli(capsys, argv):
    """Run ``dustrt`` in-process; returns (exit code, stderr).  DustrtWarnings are allowed."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DustrtWarning)
        try:
            rc = main(argv)
        except SystemExit as exc:  # argparse usage errors
            rc = exc.code
    return rc, capsys.readouterr().err


def outputs_of(argv) -> list[Path]:
    outs = [Path(argv[argv.index("-o") + 1])] if "-o" in argv else []
    if "--plot" in argv:
        outs.append(Path(argv[argv.index("--plot") + 1]))
    return outs


def assert_clean(rc, err, argv, command, needles=(), allow_ok=True):
    """Exit 0 (if allowed) or a clean exit 2: the message names ``needles``, nothing is left behind."""
    outs = outputs_of(argv)
    if rc == 0 and allow_ok:
        return
    assert rc == 2, f"exit code {rc} for {argv}:\n{err}"
    assert err.startswith(f"dustrt {command}: error:"), err
    assert "Traceback" not in err, err
    for n in needles:
        assert n in err, f"{n!r} not named in:\n{err}"
    for out in outs:
        assert not out.exists(), f"{out} written although the command failed"
        assert not out.with_name(out.name + ".chunks").exists(), "sweep checkpoints left behind"
        if out.parent.is_dir():
            stray = [p.name for p in out.parent.iterdir() if p.name.startswith(f".{out.name}.")]
            assert not stray, f"temporary files left behind: {stray}"


def command_argv(command, scenario, out, observation):
    if command in ("separate", "limit"):
        return [command, str(observation), "--scenario", str(scenario), "-o", str(out), "-q"]
    if command == "observe":
        return [command, str(scenario), "-o", str(out), "--realizations", "1", "--seed", "1", "-q"]
    return [command, str(scenario), "-o", str(out), "-q"]


def run_commands(capsys, tmp_path, scenario, observation, first, needles=(), every=False):
    """Run ``first``; when it rejects the input (or with ``every``), run every other command too.

    Returns the list of (command, exit code, stderr).
    """
    results = []
    order = [first] + [c for c in COMMANDS if c != first]
    for i, command in enumerate(order):
        argv = command_argv(command, scenario, tmp_path / f"out_{command}_{i}.nc", observation)
        rc, err = run_cli(capsys, argv)
        assert_clean(rc, err, argv, command, needles)
        results.append((command, rc, err))
        if rc == 0 and not every:
            break
    return results


@pytest.fixture(scope="module")
def base_files(tmp_path_factory):
    """The base scenario and an observation made from it (1 realisation, seed 1)."""
    d = tmp_path_factory.mktemp("fuzz_base")
    scen = d / "base.toml"
    scen.write_text(dumps(BASE))
    obs = d / "obs.nc"
    assert main(["observe", str(scen), "-o", str(obs), "--realizations", "1", "--seed", "1", "-q"]) == 0
    return scen, obs


def test_base_scenario_round_trips_and_runs_every_command(tmp_path, capsys, base_files):
    assert tomllib.loads(dumps(BASE)) == BASE
    scen, obs = base_files
    for command in COMMANDS:
        argv = command_argv(command, scen, tmp_path / f"{command}.nc", obs)
        rc, err = run_cli(capsys, argv)
        assert rc == 0, err
        assert (tmp_path / f"{command}.nc").is_file()


# ------------------------------------------------------------------ scenario mutations


def key_paths(node, prefix=()):
    """Every key path of the parsed scenario (tables, lists and leaves)."""
    if isinstance(node, dict):
        for k, v in node.items():
            yield prefix + (k,)
            yield from key_paths(v, prefix + (k,))
    elif isinstance(node, list) and node and all(isinstance(x, dict) for x in node):
        for i, v in enumerate(node):
            yield from key_paths(v, prefix + (i,))


def dotted(path) -> str:
    """The key as dustrt names it: population[0].size.radius_um."""
    out = ""
    for p in path:
        out += f"[{p}]" if isinstance(p, int) else (f".{p}" if out else p)
    return out


def key_names(path) -> list[str]:
    """The dotted key and its enclosing tables (any of them may be named by an error)."""
    return [dotted(path[:i]) for i in range(len(path), 0, -1) if not isinstance(path[i - 1], int)]


def get(d, path):
    for p in path:
        d = d[p]
    return d


def mutation_kinds(value):
    """Mutation name -> new value (``DELETE`` removes the key) for one value of the base."""
    kinds = {"delete": DELETE, "string": "oops", "bool": True, "table": {"x": 1.0}}
    if not isinstance(value, list):
        kinds["list"] = [1.0, 2.0]
        kinds["empty_array"] = []
    if isinstance(value, bool):
        kinds["number"] = 1
        kinds["flip"] = not value
    elif isinstance(value, (int, float)):
        kinds.update({"nan": math.nan, "inf": math.inf, "-inf": -math.inf, "zero": 0.0,
                      "negative": -abs(value) - 1.0, "huge": 1e300, "float": value + 0.5})
    elif isinstance(value, str):
        kinds.update({"number": 1.0, "unicode": "fin\u00e9\u2603", "empty_string": ""})
    elif isinstance(value, list):
        kinds.update({"empty_array": [], "nan_element": [math.nan] + value[1:],
                      "inf_element": value[:-1] + [math.inf], "string_element": ["a"] + value[1:],
                      "reversed": value[::-1], "single": value[:1], "nested": [value], "duplicated": value + value,
                      "negative": [-1.0] * len(value) if not isinstance(value[0], list) else [[-1.0, -2.0]]})
    elif isinstance(value, dict):
        kinds.update({"unknown_key": {**value, "bogus_key": 1.0}, "empty_table": {},
                      "list_of_tables": [value, value]})
    if isinstance(value, list) and value and all(isinstance(x, dict) for x in value):
        kinds.update({"duplicate_name": value + value, "empty_array": [], "as_table": value[0]})
    return kinds


class _Delete:
    def __repr__(self):
        return "DELETE"


DELETE = _Delete()


def mutate(raw, path, new):
    d = copy.deepcopy(raw)
    parent = get(d, path[:-1])
    if new is DELETE:
        del parent[path[-1]]
    else:
        parent[path[-1]] = copy.deepcopy(new)
    return d


def primary_command(path) -> str:
    """The command that exercises the mutated key most directly."""
    return {"optics": "optics", "instrument": "observe", "separation": "separate", "limits": "limit",
            "sweep": "sweep"}.get(path[0], "limb")


SINGLE_MUTATIONS = [(path, kind, new) for path in key_paths(BASE) for kind, new in mutation_kinds(get(BASE, path)).items()]
SINGLE_MUTATIONS += [((), "unknown_top_level_key", {**BASE, "bogus_table": {"x": 1}}),
                     ((), "empty_document", {})]

# defects of dustrt/config.py or dustrt/cli.py (not fixed here): (path, kind) -> reason
CONFIG_DEFECTS: dict[tuple, str] = {}  # (key path, mutation kind) -> known config defect (strict xfail)


def _single_params():
    out = []
    for path, kind, new in SINGLE_MUTATIONS:
        case_id = f"{dotted(path) or 'top'}-{kind}"
        marks = ()
        if (path, kind) in CONFIG_DEFECTS:
            marks = pytest.mark.xfail(reason=f"config/cli: {CONFIG_DEFECTS[path, kind]}", strict=True)
        out.append(pytest.param(path, kind, new, id=case_id, marks=marks))
    return out


@pytest.mark.parametrize("path,kind,new", _single_params())
def test_scenario_mutation(tmp_path, capsys, base_files, path, kind, new):
    _, obs = base_files
    raw = new if path == () else mutate(BASE, path, new)
    scen = tmp_path / "mutated.toml"
    scen.write_text(dumps(raw))
    results = run_commands(capsys, tmp_path, scen, obs, primary_command(path) if path else "limb",
                           needles=("mutated.toml",))
    command, rc, err = results[0]
    if rc == 2 and path and kind not in ("delete",):
        # the error must name the mutated key or a table that holds it
        names = key_names(path)
        assert any(f"'{n}" in err for n in names), f"none of {names} named in:\n{err}"


def _random_cases(n=40, seed=20240611):
    rng = random.Random(seed)
    cases = []
    for i in range(n):
        picks = rng.sample(SINGLE_MUTATIONS[:-2], rng.randint(2, 4))
        cases.append(pytest.param([(p, k) for p, k, _ in picks], rng.choice(COMMANDS), id=f"random{i}"))
    return cases


@pytest.mark.parametrize("mutations,command", _random_cases())
def test_random_combined_mutations(tmp_path, capsys, base_files, mutations, command):
    _, obs = base_files
    raw = copy.deepcopy(BASE)
    lookup = {(p, k): n for p, k, n in SINGLE_MUTATIONS}
    for path, kind in mutations:
        try:
            get(raw, path[:-1])[path[-1]]  # the key must still exist (an earlier mutation may have removed it)
        except (KeyError, IndexError, TypeError):
            continue
        raw = mutate(raw, path, lookup[path, kind])
    scen = tmp_path / "combined.toml"
    scen.write_text(dumps(raw))
    run_commands(capsys, tmp_path, scen, obs, command, needles=("combined.toml",), every=True)


EDGE_SCENARIOS = {
    # valid scenarios at the edges of the allowed ranges: every command ends cleanly
    "no_zodiacal_light": (("background", "zodiacal_scale"), 0.0),
    "zodiacal_light_off": (("background", "zodiacal_light"), False),
    "views_below_the_surface": (("view", "tangent_altitudes_km"), [-1.0, -1.0]),
    "box_line_spread_function": (("instrument", "resolution_fwhm_nm"), 0.0),
}


@pytest.mark.parametrize("name", list(EDGE_SCENARIOS))
def test_edge_scenarios_every_command(tmp_path, capsys, base_files, name):
    # the colour ratio of a component without red-band signal is NaN, not a numpy warning
    _, obs = base_files
    path, value = EDGE_SCENARIOS[name]
    scen = tmp_path / "edge.toml"
    scen.write_text(dumps(mutate(BASE, path, value)))
    results = {c: rc for c, rc, _ in run_commands(capsys, tmp_path, scen, obs, "sweep", needles=("edge.toml",),
                                                  every=True)}
    assert results["limb"] == 0 and results["optics"] == 0


BASE_TEXT = dumps(BASE)
TEXT_CASES = {
    "empty_file": b"",
    "only_comments": b"# nothing here\n",
    "whitespace": b"\n\n   \n",
    "unclosed_table_header": BASE_TEXT.replace("[wavelengths]", "[wavelengths").encode(),
    "missing_equals": BASE_TEXT.replace("start_nm = 300.0", "start_nm 300.0").encode(),
    "unterminated_string": BASE_TEXT.replace('"fine"', '"fine').encode(),
    "duplicate_key": BASE_TEXT.replace("step_nm = 20.0", "step_nm = 20.0\nstep_nm = 10.0").encode(),
    "duplicate_table": (BASE_TEXT + "\n[wavelengths]\nstart_nm = 1.0\n").encode(),
    "trailing_garbage": (BASE_TEXT + "\n}}}{{{\n").encode(),
    "non_utf8_bytes": BASE_TEXT.replace('"fine"', '"fi\udcffne"').encode("utf-8", "surrogateescape"),
    "utf16": BASE_TEXT.encode("utf-16"),
    "binary_garbage": bytes(range(256)) * 4,
    "nul_bytes": b"\x00" * 64,
    "json_instead": json.dumps(BASE).encode(),
    "nan_literal_step": BASE_TEXT.replace("step_nm = 20.0", "step_nm = nan").encode(),
    "inf_literal_altitude": BASE_TEXT.replace("altitude_km = 40.0", "altitude_km = inf").encode(),
    "date_value": BASE_TEXT.replace("local_time_h = 5.6", "local_time_h = 1979-05-27T07:32:00Z").encode(),
    "time_value": BASE_TEXT.replace("local_time_h = 5.6", "local_time_h = 07:32:00").encode(),
    "hex_integer": BASE_TEXT.replace("frames = 2", "frames = 0x2").encode(),
    "huge_integer": BASE_TEXT.replace("frames = 2", "frames = 99999999999999999999999").encode(),
}


@pytest.mark.parametrize("name", sorted(TEXT_CASES))
def test_malformed_scenario_text(tmp_path, capsys, base_files, name):
    _, obs = base_files
    scen = tmp_path / "broken.toml"
    scen.write_bytes(TEXT_CASES[name])
    run_commands(capsys, tmp_path, scen, obs, "limb", needles=("broken.toml",))


# ------------------------------------------------------------------ data tables (CSV)

CSV_BASE = {
    # kind: (scenario path to the key, value referencing the file, header, rows, first command)
    "material": (("population", 0, "material"), {"table": "table.csv"}, "wavelength_nm,n,k",
                 [f"{w:.1f},1.6,0.01" for w in range(250, 801, 50)], "optics"),
    "density": (("population", 0, "density"), {"profile": "table", "file": "table.csv"},
                "altitude_km,terminator_distance_km,density_cm3",
                [f"{h},{d},{1e-7 * math.exp(-h / 10):.4e}" for h in (0, 10, 50, 200) for d in (-500, 0, 500)], "limb"),
    "throughput": (("instrument", "throughput"), "table.csv", "wavelength_nm,throughput",
                   [f"{w:.1f},0.1" for w in range(250, 801, 50)], "observe"),
    "sun": (("sun", "spectrum"), "table.csv", "wavelength_nm,irradiance_w_m2_nm",
            [f"{w:.1f},{1.0 + w / 1000:.3f}" for w in range(250, 801, 10)], "limb"),
}


def _csv(header, rows, comment="# provenance: invented test table\n"):
    return (comment + header + "\n" + "\n".join(rows) + "\n").encode()


def _replace_field(rows, row, col, value):
    rows = rows[:]
    cells = rows[row].split(",")
    cells[col] = value
    rows[row] = ",".join(cells)
    return rows


def csv_mutations(header, rows):
    """Mutation name -> file bytes (None: a directory; "missing": no file)."""
    ncol = len(header.split(","))
    m = {
        "valid": _csv(header, rows),
        "no_provenance": _csv(header, rows, comment=""),
        "empty_file": b"",
        "header_only": _csv(header, []),
        "comments_only": b"# provenance only\n",
        "no_header": _csv("", rows, comment="").lstrip(b"\n"),
        "wrong_header": _csv(header.replace("_", "-"), rows),
        "extra_field": _csv(header, [rows[1] + ",9"] + rows[:1] + rows[2:]),
        "missing_field": _csv(header, rows[:2] + [rows[2].rsplit(",", 1)[0]] + rows[3:]),
        "one_column_only": _csv(header.split(",")[0], [r.split(",")[0] for r in rows]),
        "semicolons": _csv(header.replace(",", ";"), [r.replace(",", ";") for r in rows]),
        "tabs": _csv(header.replace(",", "\t"), [r.replace(",", "\t") for r in rows]),
        "single_row": _csv(header, rows[:1]),
        "reversed_rows": _csv(header, rows[::-1]),
        "swapped_rows": _csv(header, [rows[1], rows[0]] + rows[2:]),
        "duplicated_row": _csv(header, rows[:3] + [rows[2]] + rows[3:]),
        "binary_garbage": bytes(range(256)) * 8,
        "non_utf8": _csv(header, rows, comment="# provenance \xff\xfe\n").replace(b"\xc3\xbf\xc3\xbe", b"\xff\xfe"),
        "non_utf8_value": _csv(header, rows[:1]) + rows[1].split(",")[0].encode() + b",\xff\n",
        "directory": None,
        "missing": "missing",
    }
    for col in range(ncol):
        name = header.split(",")[col]
        for kind, value in (("text", "abc"), ("nan", "nan"), ("inf", "inf"), ("negative", "-1.0"),
                            ("zero", "0"), ("huge", "1e300"), ("empty", "")):
            m[f"{name}_{kind}"] = _csv(header, _replace_field(rows, 2, col, value))
    return m


CSV_CASES = [(kind, name) for kind, (_, _, header, rows, _) in CSV_BASE.items()
             for name in csv_mutations(header, rows)]


@pytest.mark.parametrize("kind,name", CSV_CASES, ids=[f"{k}-{n}" for k, n in CSV_CASES])
def test_malformed_csv_table(tmp_path, capsys, base_files, kind, name):
    _, obs = base_files
    path, ref, header, rows, first = CSV_BASE[kind]
    content = csv_mutations(header, rows)[name]
    table = tmp_path / "table.csv"
    if content is None:
        table.mkdir()
    elif content != "missing":
        table.write_bytes(content)
    scen = tmp_path / "with_table.toml"
    scen.write_text(dumps(mutate(BASE, path, ref)))
    results = run_commands(capsys, tmp_path, scen, obs, first, needles=("table.csv",), every=True)
    if name in ("valid", "no_provenance"):
        assert results[0][1] == 0


# ------------------------------------------------------------------ observation files (netCDF)


def _load(path) -> xr.Dataset:
    with xr.open_dataset(path, engine="h5netcdf") as ds:
        return ds.load()


def _set(ds, name, fn):
    ds = ds.copy(deep=True)
    v = ds[name].values.copy()
    fn(v)
    ds[name] = (ds[name].dims, v, ds[name].attrs)
    return ds


def _units(ds, name, units):
    ds = ds.copy(deep=True)
    if units is None:
        ds[name].attrs.pop("units", None)
    else:
        ds[name].attrs["units"] = units
    return ds


def _with_wavelengths(ds, fn, units=None):
    wl = fn(ds["wavelength_nm"].values.copy())
    attrs = dict(ds["wavelength_nm"].attrs)
    if units is not None:
        attrs["units"] = units
    return ds.assign_coords(wavelength_nm=("wavelength_nm", wl, attrs))


def _first(v, value):
    v.flat[0] = value


NETCDF_CASES = {
    # name: (function of the valid Dataset -> Dataset or bytes/None/"missing", needles, must fail)
    "valid": (lambda ds: ds, (), False),
    "drop_radiance": (lambda ds: ds.drop_vars("radiance"), ("radiance",), True),
    "drop_radiance_uncertainty": (lambda ds: ds.drop_vars("radiance_uncertainty"), ("radiance_uncertainty",), True),
    "drop_look_direction": (lambda ds: ds.drop_vars("look_direction"), ("look_direction",), True),
    "drop_observer_position_km": (lambda ds: ds.drop_vars("observer_position_km"), ("observer_position_km",), True),
    # several problems at once are all named
    "drop_three": (lambda ds: ds.drop_vars(["radiance_uncertainty", "look_direction", "observer_position_km"]),
                   ("radiance_uncertainty", "look_direction", "observer_position_km"), True),
    "drop_wavelength_nm": (lambda ds: ds.drop_vars("wavelength_nm"), ("wavelength_nm",), True),
    "radiance_2d": (lambda ds: ds.assign(radiance=ds["radiance"].isel(observation=0)), ("radiance",), True),
    "radiance_4d": (lambda ds: ds.assign(radiance=ds["radiance"].expand_dims(extra=2)), ("radiance",), True),
    "radiance_renamed_dim": (lambda ds: ds.assign(radiance=(("observation", "line_of_sight", "channel"),
                                                            ds["radiance"].values, ds["radiance"].attrs)),
                             ("radiance",), True),
    "radiance_transposed": (lambda ds: ds.assign(radiance=ds["radiance"].transpose("wavelength_nm", "observation",
                                                                                   "line_of_sight")), (), False),
    "uncertainty_extra_dim": (lambda ds: ds.assign(radiance_uncertainty=ds["radiance_uncertainty"].expand_dims(extra=2)),
                              ("radiance_uncertainty",), True),
    "uncertainty_wrong_length": (lambda ds: ds.assign(radiance_uncertainty=(
        ("observation", "line_of_sight", "channel"), ds["radiance_uncertainty"].values[..., :3],
        ds["radiance_uncertainty"].attrs)), ("radiance_uncertainty",), True),
    "uncertainty_per_wavelength": (lambda ds: ds.assign(radiance_uncertainty=ds["radiance_uncertainty"].isel(
        observation=0, line_of_sight=0)), (), False),
    "look_direction_no_vector": (lambda ds: ds.assign_coords(look_direction=ds["look_direction"].isel(vector=0)),
                                 ("look_direction",), True),
    "look_direction_two_components": (lambda ds: ds.drop_vars("look_direction").assign(look_direction=(
        ("observation", "line_of_sight", "xy"), ds["look_direction"].values[..., :2])), ("look_direction",), True),
    "look_direction_zero": (lambda ds: _set(ds, "look_direction", lambda v: v.fill(0.0)), ("look_direction",), True),
    "look_direction_nan": (lambda ds: _set(ds, "look_direction", lambda v: _first(v, np.nan)), ("look_direction",), True),
    "observer_inside_body": (lambda ds: _set(ds, "observer_position_km", lambda v: v.fill(1.0)),
                             ("observer_position_km",), True),
    "observer_position_scalar": (lambda ds: ds.drop_vars("observer_position_km").assign(observer_position_km=1800.0),
                                 ("observer_position_km",), True),
    "radiance_one_nan": (lambda ds: _set(ds, "radiance", lambda v: _first(v, np.nan)), (), False),
    "radiance_all_nan": (lambda ds: _set(ds, "radiance", lambda v: v.fill(np.nan)), ("radiance",), True),
    "radiance_one_inf": (lambda ds: _set(ds, "radiance", lambda v: _first(v, np.inf)), (), False),
    "radiance_all_inf": (lambda ds: _set(ds, "radiance", lambda v: v.fill(-np.inf)), ("radiance",), True),
    "radiance_strings": (lambda ds: ds.assign(radiance=(ds["radiance"].dims,
                                                        np.full(ds["radiance"].shape, "x"), ds["radiance"].attrs)),
                         ("radiance",), True),
    "uncertainty_nan": (lambda ds: _set(ds, "radiance_uncertainty", lambda v: _first(v, np.nan)),
                        ("radiance_uncertainty",), True),
    "uncertainty_inf": (lambda ds: _set(ds, "radiance_uncertainty", lambda v: _first(v, np.inf)),
                        ("radiance_uncertainty",), True),
    "uncertainty_zero": (lambda ds: _set(ds, "radiance_uncertainty", lambda v: _first(v, 0.0)),
                         ("radiance_uncertainty",), True),
    "uncertainty_negative": (lambda ds: _set(ds, "radiance_uncertainty", lambda v: v.__imul__(-1.0)),
                             ("radiance_uncertainty",), True),
    "radiance_units_per_um": (lambda ds: _units(ds, "radiance", "W m-2 sr-1 um-1"),
                              ("radiance", "W m-2 sr-1 um-1", RADIANCE_UNITS), True),
    "radiance_units_missing": (lambda ds: _units(ds, "radiance", None), ("radiance", RADIANCE_UNITS), True),
    "radiance_units_number": (lambda ds: _units(ds, "radiance", 5), ("radiance", RADIANCE_UNITS), True),
    "uncertainty_units_per_um": (lambda ds: _units(ds, "radiance_uncertainty", "W m-2 sr-1 um-1"),
                                 ("radiance_uncertainty", "W m-2 sr-1 um-1", RADIANCE_UNITS), True),
    "uncertainty_units_missing": (lambda ds: _units(ds, "radiance_uncertainty", None),
                                  ("radiance_uncertainty", RADIANCE_UNITS), True),
    "uncertainty_units_spacing": (lambda ds: _units(ds, "radiance_uncertainty", " W  m-2 sr-1 nm-1 "), (), False),
    "radiance_units_time_like": (lambda ds: _units(ds, "radiance", "days"), ("radiance", RADIANCE_UNITS), True),
    "uncertainty_units_relative": (lambda ds: _units(ds, "radiance_uncertainty", "1"),
                                   ("radiance_uncertainty", "'1'", RADIANCE_UNITS), True),
    "wavelength_units_um": (lambda ds: _units(ds, "wavelength_nm", "um"), ("wavelength_nm", "'um'", "'nm'"), True),
    "wavelength_units_angstrom": (lambda ds: _units(ds, "wavelength_nm", "Angstrom"), ("wavelength_nm", "Angstrom"), True),
    "wavelength_in_um": (lambda ds: _with_wavelengths(ds, lambda w: w / 1000.0, units="um"), ("wavelength_nm",), True),
    "wavelength_units_missing": (lambda ds: _units(ds, "wavelength_nm", None), (), False),
    "wavelength_beyond_model": (lambda ds: _with_wavelengths(ds, lambda w: w + 1000.0), ("wavelength_nm",), True),
    "wavelength_below_model": (lambda ds: _with_wavelengths(ds, lambda w: w - 150.0), ("wavelength_nm",), True),
    "wavelength_past_model_edge": (lambda ds: _with_wavelengths(ds, lambda w: w + 60.0),
                                   ("wavelength_nm", "base.toml", "300-720 nm"), True),
    "wavelength_reversed": (lambda ds: _with_wavelengths(ds, lambda w: w[::-1]), ("wavelength_nm",), True),
    "wavelength_swapped": (lambda ds: _with_wavelengths(ds, lambda w: w[[1, 0] + list(range(2, w.size))]),
                           ("wavelength_nm",), True),
    "wavelength_duplicate": (lambda ds: _with_wavelengths(ds, lambda w: np.where(np.arange(w.size) == 1, w[0], w)),
                             ("wavelength_nm",), True),
    "wavelength_nan": (lambda ds: _with_wavelengths(ds, lambda w: np.where(np.arange(w.size) == 2, np.nan, w)),
                       ("wavelength_nm",), True),
    "no_observations": (lambda ds: ds.isel(observation=slice(0, 0)), ("radiance",), True),
    "no_lines_of_sight": (lambda ds: ds.isel(line_of_sight=slice(0, 0)), ("radiance",), True),
    "one_wavelength": (lambda ds: ds.isel(wavelength_nm=slice(0, 1)), ("wavelength_nm",), True),
    "bin_width_negative": (lambda ds: ds.assign_attrs(bin_width_nm=-5.0), ("bin_width_nm",), True),
    "bin_width_zero": (lambda ds: ds.assign_attrs(bin_width_nm=0.0), ("bin_width_nm",), True),
    "bin_width_text": (lambda ds: ds.assign_attrs(bin_width_nm="wide"), ("bin_width_nm",), True),
    "fwhm_nan": (lambda ds: ds.assign_attrs(resolution_fwhm_nm=np.nan), ("resolution_fwhm_nm",), True),
    "mask_strings": (lambda ds: ds.assign(radiance_mask=(ds["radiance"].dims, np.full(ds["radiance"].shape, "m"))),
                     ("radiance_mask",), True),
    "mask_everything": (lambda ds: ds.assign(radiance_mask=(ds["radiance"].dims,
                                                            np.ones(ds["radiance"].shape, np.int8))), ("radiance",), True),
    "not_netcdf_text": (lambda ds: b"radiance,wavelength_nm\n1,2\n", ("bad.nc",), True),
    "empty_file": (lambda ds: b"", ("bad.nc",), True),
    "binary_garbage": (lambda ds: bytes(range(256)) * 16, ("bad.nc",), True),
    "hdf5_signature_only": (lambda ds: b"\x89HDF\r\n\x1a\n" + b"\x00" * 512, ("bad.nc",), True),
    "directory": (lambda ds: None, ("bad.nc",), True),
    "missing": (lambda ds: "missing", ("bad.nc",), True),
}


@pytest.fixture(scope="module")
def bad_observation(base_files, tmp_path_factory):
    """name -> the malformed observation file (made once, shared by separate and limit)."""
    valid = _load(base_files[1])
    made_files = {}

    def make_file(name):
        if name not in made_files:
            bad = tmp_path_factory.mktemp(name) / "bad.nc"
            made = NETCDF_CASES[name][0](valid.copy(deep=True))
            if made is None:
                bad.mkdir()
            elif isinstance(made, bytes):
                bad.write_bytes(made)
            elif isinstance(made, xr.Dataset):
                made.to_netcdf(bad, engine="h5netcdf")
            made_files[name] = bad
        return made_files[name]

    return make_file


@pytest.mark.parametrize("command", ("separate", "limit"))
@pytest.mark.parametrize("name", list(NETCDF_CASES))
def test_malformed_observation(tmp_path, capsys, base_files, bad_observation, name, command):
    scen, _ = base_files
    _, needles, must_fail = NETCDF_CASES[name]
    bad = bad_observation(name)
    argv = command_argv(command, scen, tmp_path / "out.nc", bad)
    rc, err = run_cli(capsys, argv)
    if must_fail:
        assert rc == 2, f"accepted:\n{err}"
        needles = tuple(needles) + ("bad.nc",)
    assert_clean(rc, err, argv, command, needles)


# ------------------------------------------------------------------ options


@pytest.mark.parametrize("command", COMMANDS)
def test_missing_input_files(tmp_path, capsys, base_files, command):
    scen, obs = base_files
    argv = command_argv(command, tmp_path / "nowhere.toml", tmp_path / "out.nc", obs)
    rc, err = run_cli(capsys, argv)
    assert_clean(rc, err, argv, command, ("nowhere.toml",), allow_ok=False)
    if command in ("separate", "limit"):
        argv = command_argv(command, scen, tmp_path / "out2.nc", tmp_path / "nowhere.nc")
        rc, err = run_cli(capsys, argv)
        assert_clean(rc, err, argv, command, ("nowhere.nc",), allow_ok=False)


@pytest.mark.parametrize("command", COMMANDS)
def test_output_in_missing_directory(tmp_path, capsys, base_files, command):
    scen, obs = base_files
    out = tmp_path / "no" / "such" / "dir" / "out.nc"
    argv = command_argv(command, scen, out, obs)
    rc, err = run_cli(capsys, argv)
    assert_clean(rc, err, argv, command, (str(out.parent),), allow_ok=False)


@pytest.mark.parametrize("command", COMMANDS)
def test_output_is_a_directory(tmp_path, capsys, base_files, command):
    scen, obs = base_files
    out = tmp_path / "adir.nc"
    out.mkdir()
    argv = command_argv(command, scen, out, obs)
    rc, err = run_cli(capsys, argv)
    assert rc == 2 and err.startswith(f"dustrt {command}: error:") and "adir.nc" in err, err
    assert out.is_dir() and not any(out.iterdir())


@pytest.mark.parametrize("command", [c for c in COMMANDS if c != "observe"])
def test_plot_in_missing_directory(tmp_path, capsys, base_files, command):
    scen, obs = base_files
    png = tmp_path / "nodir" / "fig.png"
    argv = command_argv(command, scen, tmp_path / "out.nc", obs) + ["--plot", str(png)]
    rc, err = run_cli(capsys, argv)
    assert_clean(rc, err, argv, command, ("fig.png",), allow_ok=False)


@pytest.mark.parametrize("command", COMMANDS)
def test_scenario_is_a_directory(tmp_path, capsys, base_files, command):
    _, obs = base_files
    d = tmp_path / "scen.toml"
    d.mkdir()
    argv = command_argv(command, d, tmp_path / "out.nc", obs)
    rc, err = run_cli(capsys, argv)
    assert_clean(rc, err, argv, command, ("scen.toml",), allow_ok=False)


USAGE_ERRORS = [
    pytest.param("observe", ["--realizations", "-1"], "--realizations", id="negative-realizations"),
    pytest.param("observe", ["--realizations", "many"], "--realizations", id="text-realizations"),
    pytest.param("observe", ["--seed", "1.5"], "--seed", id="float-seed"),
    pytest.param("limit", ["--method", "frequentist"], "--method", id="unknown-method"),
    pytest.param("sweep", ["--workers", "0"], "--workers", id="zero-workers"),
    pytest.param("sweep", ["--workers", "2", "--scheduler", "tcp://x:1"], "--scheduler", id="workers-and-scheduler"),
    pytest.param("limb", ["--no-such-option"], "--no-such-option", id="unknown-option"),
]


@pytest.mark.parametrize("command,extra,needle", USAGE_ERRORS)
def test_bad_options_are_usage_errors(tmp_path, capsys, base_files, command, extra, needle):
    scen, obs = base_files
    argv = command_argv(command, scen, tmp_path / "out.nc", obs) + extra
    rc, err = run_cli(capsys, argv)
    assert rc == 2
    # argparse: a usage line, then "dustrt COMMAND: error: ..." naming the option
    assert f"dustrt {command}: error:" in err and needle in err and "Traceback" not in err, err
    assert not (tmp_path / "out.nc").exists()


def test_too_many_realizations(tmp_path, capsys, base_files):
    scen, _ = base_files
    argv = ["observe", str(scen), "-o", str(tmp_path / "o.nc"), "--realizations", "100001"]
    rc, err = run_cli(capsys, argv)
    assert_clean(rc, err, argv, "observe", ("--realizations", "100000"), allow_ok=False)
