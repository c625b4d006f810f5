"""Solar spectrum: published totals, spot values, distance scaling."""

import numpy as np
import pytest

from dustrt.sun import solar_irradiance, solar_table


def test_integral_of_shipped_rows():
    # ASTM E-490-00a: the shipped 199.5-1100 nm rows integrate to 1014.18 W m-2 (CHECK_VALUES.md,
    # computed from the standard's table, whose full range integrates to its stated solar
    # constant 1366.1 W m-2; only the 199.5-1100 nm part ships, so that sub-total is tested).
    wl, f = solar_table()
    assert np.trapezoid(f, wl) == pytest.approx(1014.18, abs=0.01)


@pytest.mark.parametrize("wl,value", [(399.5, 1.663), (500.5, 1.857), (599.5, 1.774), (799.0, 1.135)])
def test_table_spot_values(wl, value):
    # ASTM E-490-00a sample values, W m-2 nm-1 (CHECK_VALUES.md)
    assert solar_irradiance([wl])[0] == pytest.approx(value, rel=1e-6)


def test_inverse_square_distance():
    wl = np.linspace(300, 900, 61)
    np.testing.assert_allclose(solar_irradiance(wl, distance_au=2.0), solar_irradiance(wl) / 4, rtol=1e-14)
    np.testing.assert_allclose(solar_irradiance(wl, distance_au=0.98), solar_irradiance(wl) / 0.98**2, rtol=1e-14)


def test_coarse_grid_conserves_band_integral():
    # cell averaging conserves the integral over the covered band
    wl = np.arange(250.0, 1000.1, 10.0)
    f = solar_irradiance(wl)
    tw, tf = solar_table()
    sel = (tw >= 245) & (tw <= 1005)
    ref = np.trapezoid(np.interp(np.arange(245, 1005.01, 0.05), tw, tf), np.arange(245, 1005.01, 0.05))
    assert np.sum(f * 10.0) == pytest.approx(ref, rel=1e-4)
    assert sel.any()


def test_out_of_range_and_bad_file(tmp_path):
    with pytest.raises(ValueError, match="E-490"):
        solar_irradiance([150.0, 500.0])
    p = tmp_path / "s.csv"
    p.write_text("wavelength_nm,irradiance_w_m2_nm\n300,1.0\n200,1.0\n")
    with pytest.raises(ValueError, match="s.csv"):
        solar_irradiance([250.0], spectrum=p)
    with pytest.raises(ValueError, match="distance_au"):
        solar_irradiance([500.0], distance_au=0.0)
