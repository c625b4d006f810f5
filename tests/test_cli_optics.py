"""The command line and scenario validation for grain optics."""

import subprocess
import sys
import textwrap

import numpy as np
import pytest
import xarray as xr

from dustrt.cli import main
from dustrt.config import ScenarioError, load_scenario

BASE = """
[wavelengths]
values_nm = [300.0, 450.0, 600.0]

[optics]
scattering_angles_deg = [0.0, 10.0, 45.0, 90.0, 135.0, 180.0]

[[population]]
name = "fine"
material = { n = 1.6, k = 0.01 }
size = { distribution = "lognormal", median_radius_um = 0.1, sigma_g = 1.5, min_radius_um = 0.01, max_radius_um = 1.0 }
"""


def write(tmp_path, text, name="s.toml"):
    p = tmp_path / name
    p.write_text(textwrap.dedent(text))
    return p


def test_help_is_fast_and_does_not_import_numba():
    code = ("import sys; from dustrt.cli import build_parser; build_parser(); "
            "print('numba' in sys.modules, 'xarray' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False False"
    for args in (["--help"], ["optics", "--help"]):
        with pytest.raises(SystemExit) as e:
            main(args)
        assert e.value.code == 0


def test_optics_round_trip(tmp_path):
    sc = write(tmp_path, BASE)
    out = tmp_path / "o.nc"
    png = tmp_path / "o.png"
    assert main(["optics", str(sc), "-o", str(out), "--plot", str(png), "-q"]) == 0
    ds = xr.open_dataset(out, engine="h5netcdf")
    assert list(ds["population"].values) == ["fine"]
    np.testing.assert_array_equal(ds["wavelength_nm"], [300.0, 450.0, 600.0])
    for v in ("extinction_cross_section", "scattering_cross_section", "single_scattering_albedo",
              "asymmetry_parameter", "phase_function", "degree_of_linear_polarization"):
        assert "units" in ds[v].attrs and "long_name" in ds[v].attrs
    assert ds["phase_function"].dims == ("population", "wavelength_nm", "scattering_angle_deg")
    assert ds["extinction_cross_section"].attrs["units"] == "um2"
    assert "values_nm" in ds.attrs["scenario"]
    assert png.stat().st_size > 1000
    ds.close()


def test_python_api_equals_file(tmp_path):
    from dustrt.optics import optics_dataset

    scen = load_scenario(write(tmp_path, BASE))
    ds = optics_dataset(scen.populations, scen.wavelength_nm, scen.scattering_angle_deg)
    out = tmp_path / "o.nc"
    main(["optics", str(tmp_path / "s.toml"), "-o", str(out), "-q"])
    back = xr.open_dataset(out, engine="h5netcdf")
    xr.testing.assert_allclose(ds["phase_function"], back["phase_function"], rtol=0, atol=0)
    back.close()


def test_wavelength_range_form_and_default_angles(tmp_path):
    text = BASE.replace("values_nm = [300.0, 450.0, 600.0]", "start_nm = 300.0\nstop_nm = 400.0\nstep_nm = 25.0")
    text = text.replace("[optics]\nscattering_angles_deg = [0.0, 10.0, 45.0, 90.0, 135.0, 180.0]\n", "")
    sc = load_scenario(write(tmp_path, text))
    np.testing.assert_allclose(sc.wavelength_nm, [300, 325, 350, 375, 400])
    assert sc.scattering_angle_deg.size == 181


def test_material_table_relative_path(tmp_path):
    (tmp_path / "mat").mkdir()
    (tmp_path / "mat" / "glass.csv").write_text("wavelength_nm,n,k\n200,1.5,0.01\n1000,1.6,0.0\n")
    text = BASE.replace('material = { n = 1.6, k = 0.01 }', 'material = { table = "mat/glass.csv" }')
    sc = load_scenario(write(tmp_path, text))
    assert sc.populations[0].material.refractive_index(600.0)[0] == pytest.approx(1.55 + 0.005j)


BAD_CASES = [
    ("unknown top-level key", BASE + "\n[bogus]\nx = 1\n", "bogus"),
    ("unknown population key", BASE.replace('name = "fine"', 'name = "fine"\ncolour = "red"'), "population[0].colour"),
    ("wrong type", BASE.replace("sigma_g = 1.5", 'sigma_g = "wide"'), "population[0].size.sigma_g"),
    ("out of range", BASE.replace("sigma_g = 1.5", "sigma_g = 0.5"), "population[0].size.sigma_g"),
    ("negative k", BASE.replace("k = 0.01", "k = -0.01"), "population[0].material.k"),
    ("unknown material", BASE.replace('material = { n = 1.6, k = 0.01 }', 'material = "cheese"'), "population[0].material"),
    ("missing table file", BASE.replace('material = { n = 1.6, k = 0.01 }', 'material = { table = "nope.csv" }'), "population[0].material.table"),
    ("unknown distribution", BASE.replace('"lognormal"', '"gamma"'), "population[0].size.distribution"),
    ("angle out of range", BASE.replace("180.0]", "190.0]"), "optics.scattering_angles_deg"),
    ("wavelength out of range", BASE.replace("[300.0, 450.0, 600.0]", "[30.0, 450.0]"), "wavelengths.values_nm"),
    ("unsorted wavelengths", BASE.replace("[300.0, 450.0, 600.0]", "[450.0, 300.0]"), "wavelengths.values_nm"),
    ("duplicate names", BASE + BASE.split("[optics]")[1].split("\n", 2)[2], "population"),
    ("no population", "[wavelengths]\nvalues_nm = [500.0]\n", "population"),
    ("bad TOML", "[wavelengths\n", "not valid TOML"),
    ("min above max", BASE.replace("min_radius_um = 0.01", "min_radius_um = 2.0"), "population[0].size"),
]


@pytest.mark.parametrize("label,text,key", BAD_CASES, ids=[c[0] for c in BAD_CASES])
def test_bad_input_exit_2_names_key(tmp_path, capsys, label, text, key):
    sc = write(tmp_path, text)
    out = tmp_path / "o.nc"
    assert main(["optics", str(sc), "-o", str(out)]) == 2
    err = capsys.readouterr().err
    assert key in err
    assert str(sc) in err or "scenario" in err
    assert "Traceback" not in err
    assert not out.exists()
    assert not any(p.name.endswith(".tmp") for p in tmp_path.iterdir())
    with pytest.raises(ScenarioError):
        load_scenario(sc)


def test_material_table_wavelength_outside_range(tmp_path, capsys):
    (tmp_path / "g.csv").write_text("wavelength_nm,n,k\n400,1.5,0.01\n1000,1.6,0.0\n")
    text = BASE.replace('material = { n = 1.6, k = 0.01 }', 'material = { table = "g.csv" }')
    assert main(["optics", str(write(tmp_path, text)), "-o", str(tmp_path / "o.nc")]) == 2
    err = capsys.readouterr().err
    assert "g.csv" in err and "300" in err


def test_missing_scenario_file(tmp_path, capsys):
    assert main(["optics", str(tmp_path / "none.toml"), "-o", str(tmp_path / "o.nc")]) == 2
    assert "not found" in capsys.readouterr().err


def test_demo_optics_runs(tmp_path):
    assert main(["optics", "-o", str(tmp_path / "demo.nc"), "-q"]) == 0


def test_shipped_scenarios_are_valid():
    from importlib import resources
    from pathlib import Path

    data = Path(str(resources.files("dustrt") / "data"))
    for name in ("demo_scenario.toml", "scenario_reference.toml"):
        sc = load_scenario(data / name)
        assert sc.populations and sc.observer is not None and sc.instrument is not None
    for p in Path(__file__).parents[1].joinpath("configs").glob("*.toml"):
        load_scenario(p)
