"""Bad input across the commands: exit code 2, a message naming file and key, no output left."""

import textwrap

import numpy as np
import pytest
import xarray as xr

from dustrt.cli import main

SCEN = """
[wavelengths]
start_nm = 280.0
stop_nm = 760.0
step_nm = 4.0

[observer]
altitude_km = 40.0
local_time_h = 5.6

[view]
tangent_altitudes_km = [3.0, 10.0]

[integration]
extinction = false

[[population]]
name = "fine"
material = "mare_basaltic_analogue"
size = { distribution = "monodisperse", radius_um = 0.08 }
density = { profile = "exponential", surface_density_cm3 = 1e-7, scale_height_km = 10.0 }

[instrument]
aperture_area_cm2 = 20.0
field_of_view_deg = 0.2
integration_time_s = 10.0
bin_width_nm = 8.0
resolution_fwhm_nm = 8.0
wavelength_min_nm = 300.0
wavelength_max_nm = 740.0
throughput = 0.1
read_noise_e = 10.0
"""


@pytest.fixture
def obs(tmp_path):
    p = tmp_path / "s.toml"
    p.write_text(textwrap.dedent(SCEN))
    out = tmp_path / "obs.nc"
    assert main(["observe", str(p), "-o", str(out), "--realizations", "2", "--seed", "1", "-q"]) == 0
    return p, out


def run_bad(tmp_path, capsys, args, *needles, output="out.nc"):
    out = tmp_path / output
    rc = main(args + ["-o", str(out)])
    err = capsys.readouterr().err
    assert rc == 2, err
    assert "Traceback" not in err
    for n in needles:
        assert n in err, err
    assert not out.exists()
    assert not [p for p in tmp_path.rglob("*.tmp")]
    return err


def scenario_with(tmp_path, old, new, name="bad.toml"):
    text = textwrap.dedent(SCEN)
    assert old in text
    p = tmp_path / name
    p.write_text(text.replace(old, new))
    return p


def test_radiance_mask_is_honoured(tmp_path, obs):
    scen, path = obs
    ds = xr.open_dataset(path, engine="h5netcdf").load()
    ds["radiance_mask"] = xr.zeros_like(ds["radiance"], dtype=np.int8)
    ds["radiance_mask"][:, :, 10] = 1
    ds.to_netcdf(tmp_path / "m.nc", engine="h5netcdf")
    assert main(["limit", str(tmp_path / "m.nc"), "--scenario", str(scen), "-o", str(tmp_path / "l.nc"), "-q"]) == 0
    assert xr.open_dataset(tmp_path / "l.nc", engine="h5netcdf").attrs["ignored_masked_bins"] == 2 * 2


def test_failing_plot_leaves_no_output(tmp_path, capsys):
    p = tmp_path / "s.toml"
    p.write_text(textwrap.dedent(SCEN))
    run_bad(tmp_path, capsys, ["limb", str(p), "--plot", str(tmp_path / "fig.xyz")], "fig.xyz", "format")


def test_output_must_not_overwrite_input(tmp_path, capsys, obs):
    scen, path = obs
    before = scen.read_bytes()
    assert main(["limb", str(scen), "-o", str(scen)]) == 2
    assert "input scenario" in capsys.readouterr().err
    assert scen.read_bytes() == before
    assert main(["limit", str(path), "--scenario", str(scen), "-o", str(path)]) == 2


def test_output_directory_must_exist(tmp_path, capsys):
    p = tmp_path / "s.toml"
    p.write_text(textwrap.dedent(SCEN))
    assert main(["limb", str(p), "-o", str(tmp_path / "missing" / "o.nc")]) == 2
    assert "does not exist" in capsys.readouterr().err


def test_negative_seed_is_a_usage_error(tmp_path, capsys):
    with pytest.raises(SystemExit) as e:
        main(["observe", "-o", str(tmp_path / "o.nc"), "--seed", "-1"])
    assert e.value.code == 2
    assert "--seed" in capsys.readouterr().err


BAD_SCENARIOS = [
    ("material does not cover the grid", "start_nm = 280.0", "start_nm = 150.0", "population[0].material"),
    ("instrument bins beyond the model grid", "wavelength_min_nm = 300.0", "wavelength_min_nm = 270.0",
     "instrument.wavelength_min_nm"),
    ("one wavelength with an instrument", "start_nm = 280.0\nstop_nm = 760.0\nstep_nm = 4.0",
     "values_nm = [500.0]", "wavelengths"),
]


@pytest.mark.parametrize("label,old,new,key", BAD_SCENARIOS, ids=[b[0] for b in BAD_SCENARIOS])
def test_bad_scenarios_name_their_key(tmp_path, capsys, label, old, new, key):
    p = scenario_with(tmp_path, old, new)
    run_bad(tmp_path, capsys, ["observe", str(p)], key, str(p))


def test_non_utf8_scenario(tmp_path, capsys):
    p = tmp_path / "s.toml"
    p.write_bytes(b"\xff\xfe[wavelengths]\n")
    run_bad(tmp_path, capsys, ["limb", str(p)], "UTF-8", str(p))


def test_colour_band_without_bins(tmp_path, capsys, obs):
    scen, path = obs
    p = scenario_with(tmp_path, "read_noise_e = 10.0", "read_noise_e = 10.0\n\n[separation]\nred_band_nm = [900.0, 1000.0]")
    run_bad(tmp_path, capsys, ["separate", str(path), "--scenario", str(p)], "separation.red_band_nm")
    p = scenario_with(tmp_path, "read_noise_e = 10.0", "read_noise_e = 10.0\n\n[separation]\nfit_bands_nm = [[400.0, 402.0]]",
                      name="bad2.toml")
    run_bad(tmp_path, capsys, ["limit", str(path), "--scenario", str(p)], "separation.fit_bands_nm")


def test_zero_density_hypothesis(tmp_path, capsys, obs):
    scen, path = obs
    p = scenario_with(tmp_path, "surface_density_cm3 = 1e-7", "surface_density_cm3 = 0.0")
    run_bad(tmp_path, capsys, ["limit", str(path), "--scenario", str(p)], "population[0].density", "> 0")


def test_sweep_bad_value_inside_the_grid(tmp_path, capsys):
    p = scenario_with(tmp_path, "read_noise_e = 10.0",
                      'read_noise_e = 10.0\n\n[sweep]\n"instrument.frames" = [1.0, 2.5, 3.0]')
    err = run_bad(tmp_path, capsys, ["sweep", str(p)], "instrument.frames", "2.5")
    assert not (tmp_path / "out.nc.chunks").exists()
    assert "sweep" in err


def test_all_nan_observation(tmp_path, capsys, obs):
    scen, path = obs
    ds = xr.open_dataset(path, engine="h5netcdf").load()
    ds["radiance"][:] = np.nan
    ds.to_netcdf(tmp_path / "nan.nc", engine="h5netcdf")
    run_bad(tmp_path, capsys, ["separate", str(tmp_path / "nan.nc"), "--scenario", str(scen)], "nan.nc", "radiance")


def test_zero_throughput_bins_deliver_no_data(tmp_path):
    # bins where the throughput table is zero carry no signal: NaN radiance, not inf
    (tmp_path / "thr.csv").write_text("wavelength_nm,throughput\n250,0.0\n400,0.0\n401,0.1\n800,0.1\n")
    p = scenario_with(tmp_path, "throughput = 0.1", 'throughput = "thr.csv"')
    out = tmp_path / "o.nc"
    assert main(["observe", str(p), "-o", str(out), "--realizations", "2", "--seed", "3", "-q"]) == 0
    ds = xr.open_dataset(out, engine="h5netcdf")
    wl = ds["wavelength_nm"].values
    rad = ds["radiance"].values
    assert np.all(np.isnan(rad[..., wl < 396])) and np.all(np.isfinite(rad[..., wl > 410]))
    ds.close()
    assert main(["limit", str(out), "--scenario", str(p), "-o", str(tmp_path / "l.nc"), "-q"]) == 0


def test_radius_sweep_rejects_power_law_populations(tmp_path, capsys):
    p = scenario_with(tmp_path, 'size = { distribution = "monodisperse", radius_um = 0.08 }',
                      'size = { distribution = "power-law", min_radius_um = 0.01, max_radius_um = 1.0, slope = 3.5 }')
    p.write_text(p.read_text() + '\n[sweep]\nradius_um = [0.01, 0.1]\n')
    run_bad(tmp_path, capsys, ["sweep", str(p)], "sweep.radius_um", "max_radius_um")
    # sweeping the power law's bound by its dotted key works
    text = p.read_text().replace("radius_um = [0.01, 0.1]", '"population.fine.size.max_radius_um" = [0.5, 1.0]')
    p.write_text(text)
    assert main(["sweep", str(p), "-o", str(tmp_path / "ok.nc"), "-q"]) == 0


def test_existing_outputs_are_kept_unless_overwrite(tmp_path, capsys):
    p = tmp_path / "s.toml"
    p.write_text(textwrap.dedent(SCEN))
    out, png = tmp_path / "o.nc", tmp_path / "o.png"
    out.write_bytes(b"keep me")
    assert main(["optics", str(p), "-o", str(out), "-q"]) == 2
    assert "already exists" in capsys.readouterr().err and out.read_bytes() == b"keep me"
    png.write_bytes(b"keep me too")
    assert main(["optics", str(p), "-o", str(tmp_path / "new.nc"), "--plot", str(png), "-q"]) == 2
    err = capsys.readouterr().err
    assert "--plot" in err and "already exists" in err
    assert not (tmp_path / "new.nc").exists() and png.read_bytes() == b"keep me too"
    assert main(["optics", str(p), "-o", str(out), "--plot", str(png), "-q", "--overwrite"]) == 0
    assert out.read_bytes()[:4] == b"\x89HDF" and png.read_bytes()[:4] == b"\x89PNG"


def test_traceback_on_request(tmp_path, monkeypatch):
    p = tmp_path / "s.toml"
    p.write_text("[wavelengths]\n")
    monkeypatch.setenv("DUSTRT_TRACEBACK", "1")
    with pytest.raises(ValueError, match="wavelengths"):
        main(["optics", str(p), "-o", str(tmp_path / "o.nc")])


def test_unsupported_plot_format_is_refused_before_work(tmp_path, capsys):
    p = tmp_path / "s.toml"
    p.write_text(textwrap.dedent(SCEN))
    assert main(["optics", str(p), "-o", str(tmp_path / "o.nc"), "--plot", str(tmp_path / "o.xyz")]) == 2
    err = capsys.readouterr().err
    assert "unsupported format 'xyz'" in err and "first run" not in err
    assert not (tmp_path / "o.nc").exists()
