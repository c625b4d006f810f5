"""Tests for dustrt.density: profile formulas, validation, table interpolation and readers."""

import math

import numpy as np
import pytest

from dustrt.density import (
    KIND_TABLE,
    ExponentialProfile,
    PowerLawProfile,
    TableProfile,
    TerminatorProfile,
    make_profile,
    pack_profiles,
)

# --- analytic profiles at spot values (formulas as specified in the docstrings) ---------


def test_exponential_spot_values():
    prof = ExponentialProfile(2.0, 10.0)
    np.testing.assert_allclose(prof.density_cm3([0.0, 10.0, 30.0], 0.0), [2.0, 2.0 / math.e, 2.0 * math.exp(-3)])


def test_power_law_spot_values():
    prof = PowerLawProfile(3.0, 5.0, 2.5)
    np.testing.assert_allclose(prof.density_cm3([0.0, 5.0, 15.0], 0.0), [3.0, 3.0 * 2**-2.5, 3.0 * 4**-2.5])
    flat = PowerLawProfile(3.0, 5.0, 0.0)
    np.testing.assert_allclose(flat.density_cm3([0.0, 100.0], [0.0, -50.0]), [3.0, 3.0])


def test_terminator_profile_spot_values():
    n0, H, ws, wd, d0, f = 1.5, 8.0, 100.0, 40.0, 20.0, 0.1
    prof = TerminatorProfile(n0, H, ws, wd, offset_km=d0, floor_fraction=f)
    h = 8.0
    e = math.exp(-1.0)
    shape_1sigma = f + (1 - f) * math.exp(-0.5)
    got = prof.density_cm3(h, [d0, d0 + ws, d0 - wd, d0 + 1e4, d0 - 1e4])
    np.testing.assert_allclose(got, n0 * e * np.array([1.0, shape_1sigma, shape_1sigma, f, f]), rtol=1e-14)


def test_normalisation_is_linear():
    profiles = [
        ExponentialProfile(2.0, 10.0),
        PowerLawProfile(2.0, 5.0, 1.5),
        TerminatorProfile(2.0, 10.0, 50.0, 30.0),
        TableProfile([0, 10], [-5, 5], [[1, 2], [3, 4]], scale=2.0),
    ]
    h = np.array([0.0, 3.0, 7.0])
    d = np.array([-3.0, 0.0, 40.0])
    for prof in profiles:
        doubled = prof.with_normalisation(2 * prof.normalisation)
        np.testing.assert_allclose(doubled.density_cm3(h, d), 2 * prof.density_cm3(h, d), rtol=1e-15)
        assert type(doubled) is type(prof)
    assert profiles[3].normalisation == 2.0  # TableProfile normalises with `scale`


@pytest.mark.parametrize(
    "factory, match",
    [
        (lambda: ExponentialProfile(-1.0, 10.0), "surface_density_cm3"),
        (lambda: ExponentialProfile(1.0, 0.0), "scale_height_km"),
        (lambda: ExponentialProfile(float("nan"), 10.0), "surface_density_cm3"),
        (lambda: PowerLawProfile(1.0, -5.0, 1.0), "reference_altitude_km"),
        (lambda: PowerLawProfile(1.0, 5.0, -1.0), "exponent"),
        (lambda: TerminatorProfile(1.0, 10.0, 0.0, 10.0), "sunlit_width_km"),
        (lambda: TerminatorProfile(1.0, 10.0, 10.0, -1.0), "dark_width_km"),
        (lambda: TerminatorProfile(1.0, 10.0, 10.0, 10.0, floor_fraction=1.0), "floor_fraction"),
        (lambda: TerminatorProfile(1.0, 10.0, 10.0, 10.0, offset_km=float("inf")), "offset_km"),
        (lambda: ExponentialProfile(1.0, 10.0).with_parameter("scale_height_km", -2.0), "scale_height_km"),
        (lambda: ExponentialProfile(1.0, 10.0).with_parameter("width", 2.0), "known parameters"),
        (lambda: TableProfile([0, 10], [-5, 5], [[1, 2], [3, 4]], scale=-1.0), "scale"),
    ],
)
def test_profile_validation(factory, match):
    with pytest.raises(ValueError, match=match):
        factory()


def test_with_parameter_returns_validated_copy():
    prof = TerminatorProfile(1.0, 10.0, 50.0, 30.0)
    other = prof.with_parameter("offset_km", 25.0)
    assert other.offset_km == 25.0 and prof.offset_km == 0.0


# --- table profile ---------------------------------------------------------------------


def _table():
    alt = np.array([0.0, 10.0, 30.0])
    dist = np.array([-100.0, 0.0, 50.0])
    grid = np.array([[1.0, 2.0, 4.0], [0.5, 1.0, 3.0], [0.1, 0.2, 0.3]])
    return alt, dist, grid


def test_table_values_at_nodes_and_midpoints():
    alt, dist, grid = _table()
    prof = TableProfile(alt, dist, grid, scale=3.0)
    hh, dd = np.meshgrid(alt, dist, indexing="ij")
    np.testing.assert_allclose(prof.density_cm3(hh, dd), 3.0 * grid, rtol=1e-15)
    # cell centre: mean of four corners (bilinear)
    np.testing.assert_allclose(prof.density_cm3(5.0, -50.0), 3.0 * np.mean(grid[:2, :2]), rtol=1e-15)
    # edge midpoints: linear along the edge
    np.testing.assert_allclose(prof.density_cm3(20.0, 0.0), 3.0 * 0.5 * (grid[1, 1] + grid[2, 1]), rtol=1e-15)
    np.testing.assert_allclose(prof.density_cm3(10.0, 25.0), 3.0 * 0.5 * (grid[1, 1] + grid[1, 2]), rtol=1e-15)


def test_table_zero_outside_altitude_range_and_clamped_in_distance():
    alt, dist, grid = _table()
    prof = TableProfile(alt, dist, grid)
    np.testing.assert_array_equal(prof.density_cm3([-0.01, 30.01, 1e3], 0.0), 0.0)
    np.testing.assert_allclose(prof.density_cm3([10.0, 10.0], [-1e4, 1e4]), [grid[1, 0], grid[1, 2]])
    np.testing.assert_allclose(prof.density_cm3(30.0, 0.0), grid[2, 1])  # top node itself is inside


def test_table_accepts_density_cm3_keyword_and_is_read_only():
    alt, dist, grid = _table()
    prof = TableProfile(alt, dist, density_cm3=grid)
    np.testing.assert_array_equal(prof.density_grid_cm3, grid)
    with pytest.raises(ValueError):
        prof.density_grid_cm3[0, 0] = 5.0  # stored copy is read-only
    with pytest.raises(ValueError, match="exactly once"):
        TableProfile(alt, dist, grid, density_cm3=grid)


@pytest.mark.parametrize(
    "alt, dist, grid, match",
    [
        ([0.0], [0.0, 1.0], [[1.0, 1.0]], "altitude_km needs at least two"),
        ([0.0, 1.0], [0.0, 0.0], [[1, 1], [1, 1]], "terminator_distance_km must be strictly increasing"),
        ([1.0, 0.0], [0.0, 1.0], [[1, 1], [1, 1]], "altitude_km must be strictly increasing"),
        ([0.0, 1.0], [0.0, 1.0], [[1, -1], [1, 1]], "finite and >= 0"),
        ([0.0, 1.0], [0.0, 1.0], [[1, np.nan], [1, 1]], "finite and >= 0"),
        ([0.0, 1.0], [0.0, 1.0], [[1, 1, 1], [1, 1, 1]], "shape"),
        ([0.0, np.inf], [0.0, 1.0], [[1, 1], [1, 1]], "non-finite"),
    ],
)
def test_table_rejects(alt, dist, grid, match):
    with pytest.raises(ValueError, match=match):
        TableProfile(alt, dist, grid)


def _write_csv(path, rows, header="altitude_km,terminator_distance_km,density_cm3", comments=("# demo table",)):
    lines = list(comments) + [header] + [",".join(str(v) for v in r) for r in rows]
    path.write_text("\n".join(lines) + "\n")
    return path


def _grid_rows():
    alt, dist, grid = _table()
    return [(a, d, grid[i, j]) for i, a in enumerate(alt) for j, d in enumerate(dist)]


def test_csv_round_trip_any_row_and_column_order(tmp_path):
    alt, dist, grid = _table()
    rows = _grid_rows()[::-1]  # reversed row order
    rows = [(r[2], r[0], r[1]) for r in rows]
    path = _write_csv(tmp_path / "t.csv", rows, header="density_cm3, altitude_km, terminator_distance_km")
    prof = TableProfile.from_file(path)
    np.testing.assert_array_equal(prof.altitude_km, alt)
    np.testing.assert_array_equal(prof.terminator_distance_km, dist)
    np.testing.assert_array_equal(prof.density_grid_cm3, grid)
    assert str(path) in prof.source


@pytest.mark.parametrize(
    "mutate, match",
    [
        (lambda rows: rows[:-1], "complete grid"),
        (lambda rows: rows + [rows[0]], "duplicate node"),
        (lambda rows: [(a, d, -1.0 if k == 3 else v) for k, (a, d, v) in enumerate(rows)], "'density_cm3'.*negative"),
        (lambda rows: [(a, d, "nan" if k == 3 else v) for k, (a, d, v) in enumerate(rows)], "'density_cm3'.*non-finite"),
        (lambda rows: [(a, d, "abc" if k == 3 else v) for k, (a, d, v) in enumerate(rows)], "'density_cm3'.*not a number"),
        (lambda rows: [(0.0, d, v) for (a, d, v) in rows[:3]], "'altitude_km' needs at least two"),
    ],
)
def test_csv_rejects(tmp_path, mutate, match):
    path = _write_csv(tmp_path / "bad.csv", mutate(_grid_rows()))
    with pytest.raises(ValueError, match=match) as info:
        TableProfile.from_csv(path)
    assert "bad.csv" in str(info.value)


def test_csv_rejects_missing_column(tmp_path):
    path = _write_csv(tmp_path / "nocol.csv", [(0, 0)], header="altitude_km,density_cm3")
    with pytest.raises(ValueError, match="nocol.csv.*'terminator_distance_km' missing"):
        TableProfile.from_csv(path)


def _write_nc(path, alt, dist, grid, dims=("altitude_km", "terminator_distance_km"), name="density_cm3"):
    import xarray as xr

    data = grid if dims[0] == "altitude_km" else np.asarray(grid).T
    ds = xr.Dataset(
        {name: (dims, data, {"units": "cm-3", "long_name": "grain number density"})},
        coords={"altitude_km": alt, "terminator_distance_km": dist},
    )
    ds.to_netcdf(path, engine="h5netcdf")
    return path


def test_netcdf_round_trip_and_transposed(tmp_path):
    alt, dist, grid = _table()
    for dims in (("altitude_km", "terminator_distance_km"), ("terminator_distance_km", "altitude_km")):
        path = _write_nc(tmp_path / f"t_{dims[0]}.nc", alt, dist, grid, dims=dims)
        prof = TableProfile.from_file(path)
        np.testing.assert_array_equal(prof.density_grid_cm3, grid)
        np.testing.assert_array_equal(prof.altitude_km, alt)


@pytest.mark.parametrize(
    "kwargs, match",
    [
        (dict(name="n"), "variable 'density_cm3' not found"),
        (dict(alt=np.array([0.0, 30.0, 10.0])), "'altitude_km' must be strictly increasing"),
        (dict(dist=np.array([-100.0, 0.0, 0.0])), "'terminator_distance_km' must be strictly increasing"),
        (dict(grid=-_table()[2]), "'density_cm3' must be finite and >= 0"),
        (dict(grid=np.where(_table()[2] > 3, np.nan, _table()[2])), "'density_cm3' must be finite and >= 0"),
    ],
)
def test_netcdf_rejects(tmp_path, kwargs, match):
    alt, dist, grid = _table()
    args = dict(alt=alt, dist=dist, grid=grid)
    name = kwargs.pop("name", "density_cm3")
    args.update(kwargs)
    path = _write_nc(tmp_path / "bad.nc", args["alt"], args["dist"], args["grid"], name=name)
    with pytest.raises(ValueError, match=match) as info:
        TableProfile.from_netcdf(path)
    assert "bad.nc" in str(info.value)


def test_netcdf_rejects_single_node_axis_and_wrong_dims(tmp_path):
    import xarray as xr

    path = _write_nc(tmp_path / "one.nc", np.array([0.0]), np.array([0.0, 1.0]), np.array([[1.0, 2.0]]))
    with pytest.raises(ValueError, match="one.nc.*'altitude_km' needs at least two"):
        TableProfile.from_netcdf(path)
    ds = xr.Dataset({"density_cm3": (("altitude_km", "x"), np.ones((2, 2)))}, coords={"altitude_km": [0.0, 1.0]})
    ds.to_netcdf(tmp_path / "dims.nc", engine="h5netcdf")
    with pytest.raises(ValueError, match="dims.nc.*dimensions"):
        TableProfile.from_netcdf(tmp_path / "dims.nc")


def test_from_file_rejects_unknown_suffix(tmp_path):
    with pytest.raises(ValueError, match="suffix"):
        TableProfile.from_file(tmp_path / "table.xlsx")


# --- construction by name and packing -----------------------------------------------------


def test_make_profile_by_name(tmp_path):
    assert make_profile("exponential", surface_density_cm3=1.0, scale_height_km=5.0) == ExponentialProfile(1.0, 5.0)
    path = _write_csv(tmp_path / "t.csv", _grid_rows())
    assert make_profile("table", path=path, scale=2.0).scale == 2.0
    with pytest.raises(ValueError, match="known kinds: exponential, power_law, terminator, table"):
        make_profile("gaussian")
    with pytest.raises(ValueError, match="unknown parameter"):
        make_profile("exponential", surface_density_cm3=1.0, scale_height=5.0)


def test_pack_profiles_layout():
    alt, dist, grid = _table()
    packed = pack_profiles([ExponentialProfile(1.0, 5.0), TableProfile(alt, dist, grid, scale=2.0)])
    assert list(packed.kinds) == [0, KIND_TABLE]
    np.testing.assert_array_equal(packed.params[0, :2], [1.0, 5.0])
    assert packed.params[1, 0] == 2.0
    ao, na, do, nd, vo = packed.table_index[1]
    np.testing.assert_array_equal(packed.table_altitude_km[ao : ao + na], alt)
    np.testing.assert_array_equal(packed.table_distance_km[do : do + nd], dist)
    np.testing.assert_array_equal(packed.table_density_cm3[vo : vo + na * nd].reshape(na, nd), grid)
    with pytest.raises(ValueError, match="profiles"):
        pack_profiles([])
    with pytest.raises(ValueError, match=r"profiles\[0\]"):
        pack_profiles(["exponential"])


def test_coarse_altitude_nodes_are_flagged(tmp_path):
    # A 12 km exponential sampled every 40 km: adjacent nodes differ by e^(40/12) = 28, and
    # linear interpolation over-weights the mid-layer by cosh(ln 28 / 2) = 2.74 (exact algebra).
    from dustrt import DustrtWarning
    from dustrt.config import load_scenario

    rows = [(h, d, 1e-4 * math.exp(-h / 12.0)) for h in (0.0, 40.0, 60.0) for d in (-100.0, 100.0)]
    table = TableProfile.from_file(_write_csv(tmp_path / "coarse.csv", rows))
    ratio, h0, h1 = table.steepest_altitude_step()
    assert ratio == pytest.approx(math.exp(40 / 12), rel=1e-12) and (h0, h1) == (0.0, 40.0)
    scen = tmp_path / "s.toml"
    scen.write_text('[wavelengths]\nvalues_nm = [400.0, 500.0]\n[[population]]\nname = "a"\n'
                    'material = { n = 1.5 }\nsize = { distribution = "monodisperse", radius_um = 0.1 }\n'
                    'density = { profile = "table", file = "coarse.csv" }\n')
    with pytest.warns(DustrtWarning, match=r"factor 28 between the altitude nodes 0 and 40 km.*by 174 %"):
        load_scenario(scen)
    # nodes every 4 km, then one at 100 km: the 60-100 km step holds below 1 % of the peak
    # (e^-5 = 0.7 %), so it is not flagged and the 4 km steps (ratio e^(1/3)) are the steepest
    rows = [(h, d, 1e-4 * math.exp(-h / 12.0)) for h in (*range(0, 61, 4), 100) for d in (-100.0, 100.0)]
    fine = TableProfile.from_file(_write_csv(tmp_path / "fine.csv", rows))
    assert fine.steepest_altitude_step()[0] == pytest.approx(math.exp(4 / 12), rel=1e-12)
