"""`dustrt demo`: the whole job on the packaged demo scenario, its files, numbers and documentation."""

from pathlib import Path

import numpy as np
import pytest
import xarray as xr

from dustrt.cli import main
from dustrt.demo import OUTPUTS, describe_outputs

REPO = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def demo_dir(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo") / "run"
    assert main(["demo", "-o", str(out), "-q"]) == 0
    return out


def _open(path):
    with xr.open_dataset(path, engine="h5netcdf") as ds:
        return ds.load()


def test_every_output_is_written(demo_dir):
    assert sorted(p.name for p in demo_dir.iterdir()) == sorted(OUTPUTS)
    for name in OUTPUTS:
        head = (demo_dir / name).read_bytes()[:8]
        if name.endswith(".nc"):
            assert head[:4] == b"\x89HDF"
        elif name.endswith(".png"):
            assert head[:4] == b"\x89PNG"
    for name in (n for n in OUTPUTS if n.endswith(".nc")):
        ds = _open(demo_dir / name)
        for v in ds.data_vars:
            assert "units" in ds[v].attrs, (name, v)


def test_summary_numbers_come_from_the_files(demo_dir):
    text = (demo_dir / "summary.txt").read_text()
    assert "DEMO VALUES" in text and "invented orbiter" in text and "science planning" in text
    limb = _open(demo_dir / "limb.nc")
    los = int(np.argmin(np.abs(limb["tangent_altitude_km"].values - 10.0)))
    assert limb["tangent_altitude_km"].values[los] == 10.0  # the demo grid has a 10 km view
    dust = float(limb["radiance"].isel(line_of_sight=los).sel(wavelength_nm=400.0))
    zodi = float(limb["zodiacal_radiance"].isel(line_of_sight=los).sel(wavelength_nm=400.0))
    assert f"dust, all populations          {dust:.3e}" in text
    assert f"dust + zodiacal light          {dust + zodi:.3e}" in text
    lim = _open(demo_dir / "limits.nc")
    for p in lim["population"].values:
        up = lim["density_upper_limit_cm3"].sel(population=p).values
        for u in up:
            assert f"{u:.3g}" in text
    sw = _open(demo_dir / "sweep.nc")
    for p in sw["population"].values:
        vol = sw["minimum_detectable_volume_density_um3_cm3"].sel(population=p).values
        assert f"{vol.min():.3g}" in text


def test_the_non_detection_is_a_non_detection(demo_dir):
    quiet = _open(demo_dir / "quiet_sky_observation.nc")
    assert np.all(quiet["expected_dust_radiance"].values == 0.0)
    lim = _open(demo_dir / "limits.nc")
    assert np.all(lim["two_sided"].values == 0)  # upper limits only
    assert np.all(lim["fit_reliable"].values == 1)
    # the hypothesised dusty sky is detected by the separation, all views combined, and each view's
    # amplitude agrees with the truth (1) within 3 sigma
    from dustrt.limits import joint_over_lines_of_sight

    sep = _open(demo_dir / "separation.nc").isel(population=0, observation=0)
    x, s = sep["dust_amplitude"].values, sep["dust_amplitude_uncertainty"].values
    assert np.all(np.abs(x - 1) < 3 * s)
    xj, sj = joint_over_lines_of_sight(x, s)
    assert xj / sj > 5 and abs(xj - 1) < 3 * sj
    # the 95 % upper limit sits below the 5-sigma detection threshold (Feldman & Cousins 1998:
    # at zero excess the 95 % upper limit is 1.96-ish sigma, recalled from memory; any value < 5 sigma)
    assert np.all(lim["density_upper_limit_cm3"].values < lim["detection_threshold_density_cm3"].values)


def test_existing_files_are_kept_without_overwrite(demo_dir, capsys):
    before = (demo_dir / "summary.txt").read_bytes()
    assert main(["demo", "-o", str(demo_dir), "-q"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("dustrt demo: error: output folder") and "--overwrite" in err
    assert (demo_dir / "summary.txt").read_bytes() == before


def test_output_documentation_is_current(demo_dir):
    """docs/outputs.md lists every variable with units; regenerate with `python -m dustrt.demo docs/outputs.md`."""
    current = (REPO / "docs" / "outputs.md").read_text()
    assert current == describe_outputs(demo_dir)


def test_overwrite_replaces_an_interrupted_demo_sweep(tmp_path, capsys):
    out = tmp_path / "d"
    chunks = out / "sweep.nc.chunks"
    chunks.mkdir(parents=True)
    (chunks / "chunk_000000.npz").write_bytes(b"left by an interrupted run")
    assert main(["demo", "-o", str(out), "-q"]) == 2  # refused before any work
    assert "sweep.nc.chunks" in capsys.readouterr().err and not (out / "optics.nc").exists()
    assert main(["demo", "-o", str(out), "-q", "--overwrite"]) == 0
    assert (out / "summary.txt").exists() and not chunks.exists()
