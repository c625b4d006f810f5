"""A scenario is validated as a whole: one error lists every problem, each with file and key."""

import pytest

from dustrt.cli import main
from dustrt.config import ScenarioError, load_scenario

MANY_PROBLEMS = """
[wavelengths]
start_nm = 300.0
stop_nm = "700"
step_nm = -5

[[population]]
name = "a"
material = "nonesuch"
size = { distribution = "lognormal", median_radius_um = 0.1, sigma_g = 0.5, colour = 3 }
density = { profile = "exponential", surface_density_cm3 = 1.0 }

[[population]]
name = "b"
material = { n = -1.5 }
size = { distribution = "monodisperse", radius_um = 0.1 }

[observer]
altitude_km = -3
local_time_h = 30

[instrument]
aperture_area_cm2 = 1.0
field_of_view_deg = 1.0
integration_time_s = 0

[limits]
confidence = 2

[frobnicate]
x = 1
"""

EXPECTED_KEYS = [
    "wavelengths.stop_nm", "wavelengths.step_nm", "population[0].material", "population[0].size.sigma_g",
    "population[0].size.colour", "population[0].density.scale_height_km", "population[1].material.n",
    "observer.altitude_km", "observer.local_time_h", "instrument.integration_time_s",
    "instrument.bin_width_nm", "limits.confidence", "frobnicate",
]


def test_every_problem_is_reported_once_with_its_key(tmp_path):
    path = tmp_path / "bad.toml"
    path.write_text(MANY_PROBLEMS)
    with pytest.raises(ScenarioError) as info:
        load_scenario(path)
    problems = info.value.problems
    for key in EXPECTED_KEYS:
        hits = [m for m in problems if f"key '{key}'" in m]
        assert len(hits) == 1, (key, problems)
    assert all(m.startswith(f"{path.resolve()}: key '") for m in problems)
    assert str(info.value).startswith(f"{len(problems)} problems in {path.resolve()}:")


def test_a_single_problem_reads_as_before(tmp_path):
    path = tmp_path / "one.toml"
    path.write_text(MANY_PROBLEMS.split("[[population]]")[0].replace('"700"', "700").replace("-5", "5")
                    + '[[population]]\nname = "a"\nmaterial = { n = 1.5 }\n'
                      'size = { distribution = "monodisperse", radius_um = 0.1 }\n')
    load_scenario(path)  # valid
    path.write_text(path.read_text().replace("radius_um = 0.1", "radius_um = -0.1"))
    with pytest.raises(ScenarioError) as info:
        load_scenario(path)
    assert info.value.problems == [str(info.value)]
    assert "key 'population[0].size.radius_um': must lie in [0.0001, 1000], got -0.1" in str(info.value)


def test_cli_prints_every_problem_and_exits_2(tmp_path, capsys):
    path = tmp_path / "bad.toml"
    path.write_text(MANY_PROBLEMS)
    out = tmp_path / "out.nc"
    assert main(["limb", str(path), "-o", str(out)]) == 2
    err = capsys.readouterr().err
    assert err.startswith("dustrt limb: error: ")
    assert "Traceback" not in err
    for key in EXPECTED_KEYS:
        assert f"key '{key}'" in err
    assert not out.exists()


def test_cross_table_checks_run_once_tables_are_valid(tmp_path):
    """View against observer and spectral coverage need valid tables; they are reported together."""
    path = tmp_path / "cross.toml"
    path.write_text("""
[wavelengths]
values_nm = [150.0, 500.0]
[[population]]
name = "a"
material = "pyroxene_glass_x0.5"
size = { distribution = "monodisperse", radius_um = 0.1 }
density = { profile = "exponential", surface_density_cm3 = 1.0, scale_height_km = 10.0 }
[observer]
altitude_km = 50.0
local_time_h = 6.5
[view]
tangent_altitudes_km = [10.0, 80.0]
""")
    with pytest.raises(ScenarioError) as info:
        load_scenario(path)
    keys = " ".join(info.value.problems)
    assert "key 'view.tangent_altitudes_km'" in keys
    assert "key 'population[0].material'" in keys


def test_limb_lists_every_missing_table(tmp_path, capsys):
    path = tmp_path / "optics_only.toml"
    path.write_text('[wavelengths]\nvalues_nm = [400.0, 500.0]\n'
                    '[[population]]\nname = "a"\nmaterial = { n = 1.5 }\n'
                    'size = { distribution = "monodisperse", radius_um = 0.1 }\n')
    assert main(["limb", str(path), "-o", str(tmp_path / "o.nc")]) == 2
    err = capsys.readouterr().err
    for key in ("observer", "view", "population[0].density"):
        assert f"key '{key}'" in err
    assert "3 problems" in err


def test_observe_lists_missing_limb_and_instrument_tables_together(tmp_path, capsys):
    path = tmp_path / "optics_only.toml"
    path.write_text('[wavelengths]\nvalues_nm = [400.0, 500.0]\n'
                    '[[population]]\nname = "a"\nmaterial = { n = 1.5 }\n'
                    'size = { distribution = "monodisperse", radius_um = 0.1 }\n')
    assert main(["observe", str(path), "-o", str(tmp_path / "o.nc")]) == 2
    err = capsys.readouterr().err
    for key in ("observer", "view", "population[0].density", "instrument"):
        assert f"key '{key}'" in err


def test_sweep_keys_and_grid_points_are_all_reported(tmp_path, capsys):
    from pathlib import Path

    plan = (Path(__file__).resolve().parents[1] / "configs" / "plan_grain_size.toml").read_text()
    bad = plan.replace('"instrument.integration_time_s" = [1.0, 10.0, 100.0]',
                       '"instrument.integraton_time_s" = [1.0]\n"population.lofted.density.scale_heigth_km" = [5.0]')
    bad = bad.replace('spacing = "log"', 'spacing = "logarithmic"').replace("num = 12,", "num = 0,")
    path = tmp_path / "bad.toml"
    path.write_text(bad)
    with pytest.raises(ScenarioError) as info:
        load_scenario(path)
    text = str(info.value)
    # a misspelt optional key would otherwise sweep nothing, silently
    for key in ("sweep.instrument.integraton_time_s", "sweep.population.lofted.density.scale_heigth_km",
                "sweep.radius_um.spacing", "sweep.radius_um.num"):
        assert f"key '{key}'" in text, key
    grid = plan.replace('"instrument.integration_time_s" = [1.0, 10.0, 100.0]',
                        '"instrument.integration_time_s" = [1.0, -10.0]\n"instrument.frames" = [1, -3]')
    path.write_text(grid.replace("num = 12,", "num = 2,"))
    assert main(["sweep", str(path), "-o", str(tmp_path / "s.nc")]) == 2
    err = capsys.readouterr().err
    assert "6 of 8 grid points give an invalid scenario" in err
    assert "key 'instrument.frames': must lie in [1, 1e+07], got -3 (at 4 grid point(s)" in err
    assert "key 'instrument.integration_time_s': must lie in (0, 1e+07], got -10.0 (at 4 grid point(s)" in err


def _plan_text():
    from pathlib import Path

    return (Path(__file__).resolve().parents[1] / "configs" / "plan_grain_size.toml").read_text()


def test_bands_paths_names_and_coverage_do_not_hide_other_problems(tmp_path):
    text = _plan_text().replace("[separation]", '[separation]\nblue_band_nm = [400, "a"]\njoint_fit = "yes"\n'
                                                'frobnicate = 1')
    text = text.replace("throughput = 0.1 ", 'throughput = "missing.csv" ').replace(
        "read_noise_e = 10.0", "read_noise_e = -1.0")
    text = text.replace('name = "lofted"', 'name = "bad name!"').replace(
        "radius_um = 0.1 }", "radius_um = -0.1 }")
    path = tmp_path / "holes.toml"
    path.write_text(text)
    with pytest.raises(ScenarioError) as info:
        load_scenario(path)
    text = str(info.value)
    for key in ("separation.blue_band_nm", "separation.joint_fit", "separation.frobnicate",
                "instrument.throughput", "instrument.read_noise_e", "population[0].name",
                "population[0].size.radius_um"):
        assert f"key '{key}'" in text, key
    # cross-table coverage: every problem at once
    cover = _plan_text().replace("start_nm = 250.0", "start_nm = 150.0").replace(
        "wavelength_max_nm = 790.0", "wavelength_max_nm = 900.0")
    path.write_text(cover)
    with pytest.raises(ScenarioError) as info:
        load_scenario(path)
    for key in ("population[0].material", "sun.spectrum", "instrument.wavelength_max_nm"):
        assert f"key '{key}'" in str(info.value), key


def test_sweep_key_rules(tmp_path):
    path = tmp_path / "s.toml"
    # a bad base value is reported once, by its own table, not again as an unsweepable key
    path.write_text(_plan_text().replace("local_time_h = 5.0", 'local_time_h = "x"').replace(
        "detection_sigma = 5.0", 'detection_sigma = 5.0\n"observer.local_time_h" = [5.0, 5.5]'))
    with pytest.raises(ScenarioError) as info:
        load_scenario(path)
    assert info.value.problems == [p for p in info.value.problems if "observer.local_time_h" in p]
    assert len(info.value.problems) == 1
    # the [sweep] table's own keys are not swept
    path.write_text(_plan_text().replace("detection_sigma = 5.0", 'detection_sigma = 5.0\n"sweep.detection_sigma" = [3.0]'))
    with pytest.raises(ScenarioError, match=r"key 'sweep.sweep.detection_sigma'.*not swept"):
        load_scenario(path)


def test_joint_fit_rules(tmp_path, capsys):
    second = ('\n[[population]]\nname = "other"\nmaterial = "mare_basaltic_analogue"\n'
              'size = { distribution = "monodisperse", radius_um = 0.3 }\n'
              'density = { profile = "exponential", surface_density_cm3 = 1e-6, scale_height_km = 5.0 }\n')
    text = _plan_text().replace("free_colour_slope = true ", "free_colour_slope = true\njoint_fit = true ")
    path = tmp_path / "j.toml"
    path.write_text(text.replace("[background]", second + "\n[background]"))
    sc = load_scenario(path)  # valid: `separate` does not sweep; `limit` and `sweep` refuse a common radius
    from dustrt.limits import size_variants

    from dustrt import DustrtWarning

    with pytest.warns(DustrtWarning, match="integration_time_s are ignored"), \
            pytest.raises(ValueError, match=r"key 'sweep.radius_um'.*joint fit degenerate"):
        size_variants(sc, "dustrt limit")
    assert main(["sweep", str(path), "-o", str(tmp_path / "s.nc")]) == 2
    # a population's own size key is swept instead (and `limit` follows it)
    per_pop = text.replace('radius_um = { start = 0.01, stop = 1.0, num = 12, spacing = "log" }',
                           '"population.other.size.radius_um" = [0.2, 0.3]').replace(
        '"instrument.integration_time_s" = [1.0, 10.0, 100.0]', "")
    path.write_text(per_pop.replace("[background]", second + "\n[background]"))
    variants, swept = size_variants(load_scenario(path), "dustrt limit")
    assert swept == [{"population.other.size.radius_um": 0.2}, {"population.other.size.radius_um": 0.3}]
    assert [v.population("other").size.radius_um for v in variants] == [0.2, 0.3]
    assert all(v.population("lofted").size.radius_um == 0.1 for v in variants)
    many = "".join(second.replace('"other"', f'"p{i}"') for i in range(8))
    path.write_text(text.replace("[background]", many + "\n[background]").replace(
        'radius_um = { start = 0.01, stop = 1.0, num = 12, spacing = "log" }', ""))
    with pytest.raises(ScenarioError, match=r"key 'separation.joint_fit': a joint fit takes at most 8"):
        load_scenario(path)


def test_checks_across_tables_run_on_the_valid_tables(tmp_path):
    # a bad [body] does not stop the instrument range being checked against [wavelengths]; a bad
    # [instrument] skips that check (its defaults would mislead) but not the others
    path = tmp_path / "x.toml"
    text = _plan_text().replace("[observer]", "[body]\nradius_km = \"big\"\n\n[observer]")
    path.write_text(text.replace("wavelength_max_nm = 790.0", "wavelength_max_nm = 900.0"))
    with pytest.raises(ScenarioError) as info:
        load_scenario(path)
    keys = " ".join(info.value.problems)
    assert "key 'body.radius_km'" in keys and "key 'instrument.wavelength_max_nm'" in keys
    path.write_text(text.replace("start_nm = 250.0", "start_nm = 150.0").replace("frames = 6", "frames = -6"))
    with pytest.raises(ScenarioError) as info:
        load_scenario(path)
    keys = " ".join(info.value.problems)
    assert "key 'instrument.frames'" in keys and "key 'population[0].material'" in keys
    assert "key 'sun.spectrum'" in keys and "instrument.wavelength_min_nm" not in keys


def test_size_key_sweeps_keep_the_scenario_and_label_their_values(tmp_path):
    import dataclasses

    from dustrt.limits import is_size_key, size_variants

    assert is_size_key("radius_um") and is_size_key("population.fine.size.sigma_g")
    assert is_size_key("population.size.size.radius_um")  # a population may be called "size"
    assert not is_size_key("population.size.density.scale_height_km")
    demo = load_scenario("demo")
    changed = dataclasses.replace(demo, separation=dataclasses.replace(demo.separation, zodiacal_colour_order=3),
                                  limits=dataclasses.replace(demo.limits, confidence=0.9))
    variants, swept = size_variants(changed, "dustrt limit")
    assert all(v.separation.colour_order == 3 and v.limits.confidence == 0.9 for v in variants)
    assert [v.populations[0].size.median_radius_um for v in variants] == [s["radius_um"] for s in swept]
