"""Zodiacal-light background for an observer near the Moon (heliocentric distance about 1 AU).

The zodiacal light is sunlight scattered by interplanetary dust. It is the
diffuse background against which a limb-viewing spectrometer looks for lofted
lunar grains, so the dust signal must be compared with it ray by ray.

Model, in three factors (all public functions are pure numpy and vectorised):

    Z(λ) = Z_500(Δλ, β, r) · f_co(λ, ε) · F_sun(λ) / <F_sun>_490–510 nm

- ``Z_500``: the 500 nm brightness of Table 17 of [1] on its (Δλ, β) grid,
  extended towards the Sun with the power law Z ∝ ε^-2.45 of [2] where the
  table has no entries, and scaled with heliocentric distance as r^-2.3 [3].
- ``f_co``: the reddening of the zodiacal light relative to sunlight, [1] Eq. 22.
- ``F_sun(λ) / <F_sun>``: the solar spectrum, normalised at 500 nm by a band
  average (see :func:`zodiacal_radiance`).

Angles: in dustrt's body-centred frame (+x toward the Sun, +z ecliptic north,
+y completing a right-handed set) a unit look vector l̂ has helio-ecliptic
longitude difference from the Sun Δλ = atan2(|l_y|, l_x) (0° toward the Sun),
ecliptic latitude β = asin(l_z), and solar elongation ε with
cos ε = cos Δλ · cos β ([1] Eq. 11). The Moon's distance from the Earth
(≤ 0.003 AU) is negligible against the extent of the zodiacal cloud, so the
1-AU tables of [1] apply unchanged.

References
----------
.. [1] Leinert, Ch., et al. (1998), Astron. Astrophys. Suppl. Ser. 127, 1–99
   (Table 17, Eq. 11, Eq. 22, Table 19).
.. [2] Hahn, J. M., Zook, H. A., Cooper, B., & Sunkara, B. (2002), Icarus 158,
   360–378 (Z ∝ ε^(-2.45 ± 0.05), ε ≈ 3–30°).
.. [3] Leinert, Ch., Richter, I., Pitz, E., & Planck, B. (1981), Astron.
   Astrophys. 103, 177–188 (I ∝ r^(-2.3 ± 0.05)).
"""

from __future__ import annotations

import functools
from importlib import resources
from typing import NamedTuple

import numpy as np

__all__ = [
    "HELIOCENTRIC_DISTANCE_EXPONENT",
    "HELIOCENTRIC_DISTANCE_RANGE_AU",
    "MIN_ELONGATION_DEG",
    "S10_500NM_W_M2_SR_NM",
    "SMALL_ELONGATION_EXPONENT",
    "SMALL_ELONGATION_MODES",
    "SOLAR_NORMALISATION_BAND_NM",
    "TABLE17_UNIT_W_M2_SR_NM",
    "WAVELENGTH_RANGE_NM",
    "ecliptic_coordinates_deg",
    "zodiacal_brightness_500nm",
    "zodiacal_colour_correction",
    "zodiacal_radiance",
]

#: Unit of Table 17 of [1]: 1e-8 W m-2 sr-1 µm-1 = 1e-8 / 1000 W m-2 sr-1 nm-1 = 1e-11 W m-2 sr-1 nm-1.
TABLE17_UNIT_W_M2_SR_NM = 1e-11
#: One S10 unit at 500 nm: 1.28e-8 W m-2 sr-1 µm-1 ([1], Table 16 vs Table 17) in W m-2 sr-1 nm-1.
S10_500NM_W_M2_SR_NM = 1.28e-11
#: d ln Z / d ln ε of the inner zodiacal light, -2.45 ± 0.05 for ε ≈ 3–30° ([2]).
SMALL_ELONGATION_EXPONENT = -2.45
#: d ln Z / d ln r with heliocentric distance r, -2.3 ± 0.05 ([3]).
HELIOCENTRIC_DISTANCE_EXPONENT = -2.3
#: Allowed heliocentric distance [AU]. [3] measured 0.3–1 AU; up to 3 AU is an
#: extrapolation of the same law (common practice), beyond it the cloud thins out faster.
HELIOCENTRIC_DISTANCE_RANGE_AU = (0.3, 3.0)
#: Below this elongation [deg] the F-corona and the solar disk dominate and the
#: power law of [2] (fitted from ε ≈ 3°) no longer describes the sky.
MIN_ELONGATION_DEG = 2.0
#: What to do with looks closer to the Sun than MIN_ELONGATION_DEG.
SMALL_ELONGATION_MODES = ("clamp", "nan", "raise")
#: Allowed wavelengths [nm] for the colour law of [1] Eq. 22: the UV to near-IR,
#: where the zodiacal light is scattered sunlight (thermal emission takes over
#: in the mid-IR); the limits are common practice, not from [1].
WAVELENGTH_RANGE_NM = (200.0, 2500.0)
#: Band [nm] over which the solar spectrum is averaged to normalise it at 500 nm.
SOLAR_NORMALISATION_BAND_NM = (490.0, 510.0)

_REFERENCE_WAVELENGTH_NM = 500.0
_TABLE_FILE = "zodiacal_leinert1998_table17.csv"


# ---------------------------------------------------------------------------
# Table 17 of [1]
# ---------------------------------------------------------------------------


class _Table17(NamedTuple):
    dlon_deg: np.ndarray  # (nlon,) Δλ nodes [deg], 0..180
    lat_deg: np.ndarray  # (nlat,) β nodes [deg], 0..90
    ln_value: np.ndarray  # (nlon, nlat) ln(brightness in table units); NaN = not tabulated
    first_row: np.ndarray  # (nlat,) index of the first tabulated Δλ in each β column
    cell_min_dlon_deg: np.ndarray  # (nlat-1,) smallest Δλ at which a β cell is fully tabulated


@functools.lru_cache(maxsize=1)
def _table17() -> _Table17:
    """Read and check the packaged copy of Table 17 of [1] (cached)."""
    text = resources.files("dustrt").joinpath("data", _TABLE_FILE).read_text(encoding="utf-8")
    rows = [line for line in text.splitlines() if line.strip() and not line.lstrip().startswith("#")]
    header = rows[0].split(",")
    lat = np.array([float(name.lstrip("b")) for name in header[1:]])
    body = np.array([[float(cell) for cell in row.split(",")] for row in rows[1:]])
    dlon, values = body[:, 0], body[:, 1:]

    # Structural checks: the interpolation and the boundary construction below rely on them.
    if not (np.all(np.diff(dlon) > 0) and dlon[0] == 0.0 and dlon[-1] == 180.0):
        raise RuntimeError(f"{_TABLE_FILE}: longitude nodes must rise from 0 to 180 deg")
    if not (np.all(np.diff(lat) > 0) and lat[0] == 0.0 and lat[-1] == 90.0):
        raise RuntimeError(f"{_TABLE_FILE}: latitude nodes must rise from 0 to 90 deg")
    finite = np.isfinite(values)
    if np.any(values[finite] <= 0.0):
        raise RuntimeError(f"{_TABLE_FILE}: brightness values must be positive")
    first_row = np.argmax(finite, axis=0)
    for j, i0 in enumerate(first_row):
        if not np.all(finite[i0:, j]):
            raise RuntimeError(f"{_TABLE_FILE}: column b{lat[j]:g} has a gap after its first value")
    cell_min = np.maximum(dlon[first_row[:-1]], dlon[first_row[1:]])
    # The untabulated corner must be a 'staircase' shrinking toward the pole and
    # lying within 90° of the Sun, so that every ray leaving the Sun at fixed
    # position angle crosses its edge exactly once (see _inner_edge_elongation_deg).
    if np.any(np.diff(cell_min) > 0) or np.any(cell_min >= 90.0):
        raise RuntimeError(f"{_TABLE_FILE}: untabulated region is not a corner around the Sun")

    ln_value = np.log(np.where(finite, values, 1.0))
    ln_value[~finite] = np.nan
    for array in (dlon, lat, ln_value, first_row, cell_min):
        array.setflags(write=False)
    return _Table17(dlon, lat, ln_value, first_row, cell_min)


def _column_elongation_deg(dlon_deg: np.ndarray, lat_deg: float) -> np.ndarray:
    """Elongation [deg] of (Δλ, β) by [1] Eq. 11, cos ε = cos Δλ cos β."""
    cos_eps = np.cos(np.radians(dlon_deg)) * np.cos(np.radians(lat_deg))
    return np.degrees(np.arccos(np.clip(cos_eps, -1.0, 1.0)))


def _table_ln_brightness(dlon_deg: np.ndarray, lat_deg: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """ln of the Table 17 brightness [table units] at folded (Δλ, β), and where it is tabulated.

    Interpolation: along each β column, ln Z is linear in ln ε (ε from Eq. 11 at
    that column's β, strictly increasing with Δλ for β < 90°); between the two
    bracketing columns, ln Z is linear in β. Why: the inner zodiacal light is a
    power law in elongation ([2]), so ln Z is nearly linear in ln ε and this
    scheme keeps the table's own node-to-node slope inside each cell (in the
    ecliptic between 15° and 30°: -2.04, -2.29, -2.40, where interpolating
    ln Z linearly in Δλ would swing the local slope from -1.8 to -2.6); interpolating
    ln Z keeps values positive and each cell monotone between its nodes, and
    nodes are reproduced exactly. The pole column (β = 90°, where Δλ is
    degenerate) is interpolated in Δλ; the table holds it constant.
    """
    tab = _table17()
    n = dlon_deg.size
    columns = np.empty((tab.lat_deg.size, n))
    for j, lat_node in enumerate(tab.lat_deg):
        i0 = tab.first_row[j]
        y_nodes = tab.ln_value[i0:, j]
        if lat_node >= 90.0:
            columns[j] = np.interp(dlon_deg, tab.dlon_deg[i0:], y_nodes)
            continue
        # ε ≥ 1e-300 only guards ln(0) at Δλ = 0 in the ecliptic column, a point
        # that is never tabulated and so never carries weight.
        x_nodes = np.log(np.maximum(_column_elongation_deg(tab.dlon_deg[i0:], lat_node), 1e-300))
        x = np.log(np.maximum(_column_elongation_deg(dlon_deg, lat_node), 1e-300))
        columns[j] = np.interp(x, x_nodes, y_nodes)  # clamps below the first node: weight-free there

    n_cell = tab.lat_deg.size - 1
    k = np.clip(np.searchsorted(tab.lat_deg, lat_deg, side="right") - 1, 0, n_cell - 1)
    t = (lat_deg - tab.lat_deg[k]) / (tab.lat_deg[k + 1] - tab.lat_deg[k])
    idx = np.arange(n)
    ln_z = (1.0 - t) * columns[k, idx] + t * columns[k + 1, idx]
    tabulated = dlon_deg >= tab.cell_min_dlon_deg[k]
    return ln_z, tabulated


def _inner_edge_elongation_deg(position_angle_deg: np.ndarray) -> np.ndarray:
    """Elongation [deg] where a ray from the Sun at fixed position angle enters the tabulated region.

    Position angle ψ is measured around the Sun from the ecliptic (ψ = 0°,
    toward larger Δλ) to ecliptic north (ψ = 90°); folded angles give
    0° ≤ ψ ≤ 90°. Along such a ray (ε < 90°) both Δλ and β grow with ε, and the
    tabulated region is the union over latitude cells k of
    {β ≥ β_k and Δλ ≥ Δλ_min,k}. The ray reaches β = β_k at
    sin ε = sin β_k / sin ψ and Δλ = Δλ_min,k at tan ε = tan Δλ_min,k / cos ψ;
    it enters cell k's quadrant at the later of the two, and the region at the
    earliest over k.
    """
    tab = _table17()
    psi = np.radians(position_angle_deg)
    sin_psi, cos_psi = np.sin(psi), np.cos(psi)
    edge = np.full(psi.shape, np.inf)
    for lat_k, dlon_k in zip(tab.lat_deg[:-1], tab.cell_min_dlon_deg):
        if lat_k == 0.0:
            eps_lat = np.zeros(psi.shape)
        else:
            sin_b = np.sin(np.radians(lat_k))
            eps_lat = np.full(psi.shape, np.inf)  # the ray never gets that far from the ecliptic
            reach = sin_psi >= sin_b
            eps_lat[reach] = np.degrees(np.arcsin(np.minimum(sin_b / sin_psi[reach], 1.0)))
        eps_lon = np.degrees(np.arctan2(np.tan(np.radians(dlon_k)), cos_psi))
        edge = np.minimum(edge, np.maximum(eps_lat, eps_lon))
    return edge


def _fold(dlon_deg: np.ndarray, lat_deg: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Fold Δλ to 0–180° and β to 0–90° (the tables are symmetric about both)."""
    dlon = np.mod(dlon_deg, 360.0)
    dlon = np.where(dlon > 180.0, 360.0 - dlon, dlon)
    return dlon, np.abs(lat_deg)


def _sun_centred_angles(dlon_deg: np.ndarray, lat_deg: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Elongation ε and position angle ψ [deg] of folded (Δλ, β), computed from the unit vector."""
    dl, b = np.radians(dlon_deg), np.radians(lat_deg)
    lx, ly, lz = np.cos(b) * np.cos(dl), np.cos(b) * np.sin(dl), np.sin(b)
    elongation = np.degrees(np.arctan2(np.hypot(ly, lz), lx))  # = [1] Eq. 11, accurate near 0°
    position_angle = np.degrees(np.arctan2(lz, ly))
    return elongation, position_angle


# ---------------------------------------------------------------------------
# Validation helpers
# ---------------------------------------------------------------------------


def _finite_array(value, name: str) -> np.ndarray:
    try:
        array = np.asarray(value, dtype=float)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"{name} must be numeric, got {value!r}") from exc
    if not np.all(np.isfinite(array)):
        raise ValueError(f"{name} must be finite (no NaN or inf)")
    return array


def _in_range(value, name: str, low: float, high: float, unit: str) -> np.ndarray:
    array = _finite_array(value, name)
    if array.size and (array.min() < low or array.max() > high):
        raise ValueError(
            f"{name} must lie in [{low:g}, {high:g}] {unit}, got values in "
            f"[{array.min():g}, {array.max():g}]"
        )
    return array


def _distance_au(value) -> float:
    array = _in_range(value, "heliocentric_distance_au", *HELIOCENTRIC_DISTANCE_RANGE_AU, "AU")
    if array.ndim != 0:
        raise ValueError("heliocentric_distance_au must be a scalar")
    return float(array)


def _look_directions(value) -> np.ndarray:
    array = _finite_array(value, "look_directions")
    if array.shape[-1:] != (3,) or array.ndim > 2:
        raise ValueError(f"look_directions must have shape (3,) or (n, 3), got {array.shape}")
    norm = np.linalg.norm(array, axis=-1, keepdims=True)
    if np.any(norm == 0.0):
        raise ValueError("look_directions must be non-zero vectors")
    return array / norm


# ---------------------------------------------------------------------------
# Public API
# ---------------------------------------------------------------------------


def ecliptic_coordinates_deg(look_directions) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Sun-relative ecliptic coordinates of look directions in the body-centred solar frame.

    Parameters
    ----------
    look_directions : array_like, shape (3,) or (n, 3)
        Look vectors in the frame with +x toward the Sun, +z ecliptic north
        [dimensionless]; they are normalised here, so need not be unit length.

    Returns
    -------
    delta_longitude_deg : float or ndarray (n,)
        Helio-ecliptic longitude difference from the Sun, folded to [0, 180]
        [deg]: Δλ = atan2(|l_y|, l_x); 0 looks toward the Sun.
    latitude_deg : float or ndarray (n,)
        Ecliptic latitude β = asin(l_z), signed, in [-90, 90] [deg].
    elongation_deg : float or ndarray (n,)
        Solar elongation ε in [0, 180] [deg], cos ε = cos Δλ cos β ([1] Eq. 11),
        computed as the angle between l̂ and +x.

    References
    ----------
    .. [1] Leinert, Ch., et al. (1998), A&AS 127, 1, Eq. 11.
    """
    unit = _look_directions(look_directions)
    lx, ly, lz = unit[..., 0], unit[..., 1], unit[..., 2]
    delta_longitude = np.degrees(np.arctan2(np.abs(ly), lx))
    latitude = np.degrees(np.arcsin(np.clip(lz, -1.0, 1.0)))
    elongation = np.degrees(np.arctan2(np.hypot(ly, lz), lx))  # better than arccos near 0 and 180
    return delta_longitude[()], latitude[()], elongation[()]


def zodiacal_brightness_500nm(
    delta_longitude_deg,
    latitude_deg,
    heliocentric_distance_au: float = 1.0,
    *,
    below_min_elongation: str = "clamp",
):
    """Zodiacal-light spectral radiance at 500 nm from Table 17 of Leinert et al. (1998).

    On the table: bilinear interpolation of ln Z, linear in ln ε along each
    latitude column and linear in β across columns. It is exact at the nodes,
    positive, monotone within each cell, and follows the near-power-law fall
    of the inner zodiacal light without bending its slope inside a cell
    (linear in Δλ would). Toward the Sun, where the table has no
    entries (NaN, ε below about 14–18°), the brightness follows the inner
    power law Z ∝ ε^-2.45 of [2] along the ray of constant position angle
    around the Sun, anchored to the interpolated table value where that ray
    enters the tabulated region, so Z is continuous across the edge.
    Looks closer to the Sun than ``MIN_ELONGATION_DEG`` (2°), where the
    F-corona and the solar disk take over, are handled by
    ``below_min_elongation``. The result is scaled by (r / 1 AU)^-2.3 [3].

    Parameters
    ----------
    delta_longitude_deg : array_like
        Helio-ecliptic longitude difference from the Sun, in [-360, 360] [deg];
        folded to [0, 180] (the table is symmetric east–west of the Sun).
    latitude_deg : array_like
        Ecliptic latitude in [-90, 90] [deg]; folded to [0, 90] (north–south
        symmetry). Broadcast against ``delta_longitude_deg``.
    heliocentric_distance_au : float, optional
        Observer's distance from the Sun, in [0.3, 3] [AU]; default 1.
    below_min_elongation : {"clamp", "nan", "raise"}, optional
        For ε < 2°: "clamp" (default) returns the value at ε = 2° on the same
        position angle; "nan" returns NaN; "raise" raises ``ValueError``.

    Returns
    -------
    float or ndarray
        Spectral radiance at 500 nm [W m⁻² sr⁻¹ nm⁻¹], broadcast shape of the
        angle inputs. Table 17 is in 1e-8 W m⁻² sr⁻¹ µm⁻¹ = 1e-11
        W m⁻² sr⁻¹ nm⁻¹ (e.g. ecliptic pole: 77 → 7.7e-10 W m⁻² sr⁻¹ nm⁻¹).

    References
    ----------
    .. [1] Leinert, Ch., et al. (1998), A&AS 127, 1, Table 17 and Eq. 11.
    .. [2] Hahn, J. M., Zook, H. A., Cooper, B., & Sunkara, B. (2002), Icarus 158, 360.
    .. [3] Leinert, Ch., Richter, I., Pitz, E., & Planck, B. (1981), A&A 103, 177.
    """
    if below_min_elongation not in SMALL_ELONGATION_MODES:
        raise ValueError(
            f"below_min_elongation must be one of {SMALL_ELONGATION_MODES}, got {below_min_elongation!r}"
        )
    dlon_in = _in_range(delta_longitude_deg, "delta_longitude_deg", -360.0, 360.0, "deg")
    lat_in = _in_range(latitude_deg, "latitude_deg", -90.0, 90.0, "deg")
    distance_au = _distance_au(heliocentric_distance_au)
    dlon_in, lat_in = np.broadcast_arrays(dlon_in, lat_in)
    shape = dlon_in.shape
    dlon, lat = _fold(dlon_in.ravel(), lat_in.ravel())

    elongation, position_angle = _sun_centred_angles(dlon, lat)
    too_close = elongation < MIN_ELONGATION_DEG
    if below_min_elongation == "raise" and np.any(too_close):
        raise ValueError(
            f"delta_longitude_deg/latitude_deg: {np.count_nonzero(too_close)} look(s) within "
            f"{MIN_ELONGATION_DEG:g} deg of the Sun (minimum elongation "
            f"{elongation.min():.3g} deg), where the zodiacal-light model does not apply"
        )

    ln_z, tabulated = _table_ln_brightness(dlon, lat)
    inner = ~tabulated
    if np.any(inner):
        psi = position_angle[inner]
        edge_eps = _inner_edge_elongation_deg(psi)
        edge_eps_rad, psi_rad = np.radians(edge_eps), np.radians(psi)
        ex = np.cos(edge_eps_rad)
        ey = np.sin(edge_eps_rad) * np.cos(psi_rad)
        ez = np.sin(edge_eps_rad) * np.sin(psi_rad)
        # Table value where the constant-position-angle ray enters the table.
        ln_edge, _ = _table_ln_brightness(np.degrees(np.arctan2(ey, ex)), np.degrees(np.arcsin(ez)))
        eps = np.maximum(elongation[inner], MIN_ELONGATION_DEG)  # clamp; "nan" masked below
        ln_z[inner] = ln_edge + SMALL_ELONGATION_EXPONENT * np.log(eps / edge_eps)  # [2]

    radiance = np.exp(ln_z) * TABLE17_UNIT_W_M2_SR_NM
    radiance *= distance_au**HELIOCENTRIC_DISTANCE_EXPONENT  # [3]
    if below_min_elongation == "nan":
        radiance[too_close] = np.nan
    return radiance.reshape(shape)[()]


def zodiacal_colour_correction(wavelength_nm, elongation_deg):
    """Colour of the zodiacal light relative to the Sun, Leinert et al. (1998) Eq. 22.

    f_co(λ, ε) = 1 + b · log10(λ / 500 nm), with b = 1.2 (λ ≤ 500 nm) or 0.8
    (λ > 500 nm) for ε ≤ 30°, b = 0.9 or 0.6 for ε ≥ 90°, and b linear in ε
    between 30° and 90°. f_co = 1 at 500 nm; f_co > 1 redward (the zodiacal
    light is redder than sunlight).

    Parameters
    ----------
    wavelength_nm : array_like
        Wavelength(s), in [200, 2500] [nm]; shape (W,) or scalar.
    elongation_deg : array_like
        Solar elongation(s), in [0, 180] [deg]; shape (n,) or scalar.

    Returns
    -------
    float or ndarray
        f_co [dimensionless], shape ``elongation.shape + wavelength.shape``
        (the outer product: (n,) and (W,) give (n, W)).

    References
    ----------
    .. [1] Leinert, Ch., et al. (1998), A&AS 127, 1, Eq. 22.
    """
    wavelength = _in_range(wavelength_nm, "wavelength_nm", *WAVELENGTH_RANGE_NM, "nm")
    elongation = _in_range(elongation_deg, "elongation_deg", 0.0, 180.0, "deg")
    weight = np.clip((elongation - 30.0) / 60.0, 0.0, 1.0)  # [1] Eq. 22: linear in ε over 30–90°
    b_blue = 1.2 + (0.9 - 1.2) * weight
    b_red = 0.8 + (0.6 - 0.8) * weight
    expand = elongation.shape + (1,) * wavelength.ndim
    blue = wavelength <= _REFERENCE_WAVELENGTH_NM
    b = np.where(blue, b_blue.reshape(expand), b_red.reshape(expand))
    return (1.0 + b * np.log10(wavelength / _REFERENCE_WAVELENGTH_NM))[()]


def _solar_spectrum(solar_wavelength_nm, solar_irradiance_w_m2_nm) -> tuple[np.ndarray, np.ndarray]:
    wavelength = _finite_array(solar_wavelength_nm, "solar_wavelength_nm")
    irradiance = _finite_array(solar_irradiance_w_m2_nm, "solar_irradiance_w_m2_nm")
    if wavelength.ndim != 1 or wavelength.size < 2:
        raise ValueError("solar_wavelength_nm must be a 1-D array of at least 2 wavelengths")
    if irradiance.shape != wavelength.shape:
        raise ValueError(
            f"solar_irradiance_w_m2_nm must have the shape of solar_wavelength_nm {wavelength.shape}, "
            f"got {irradiance.shape}"
        )
    if np.any(np.diff(wavelength) <= 0):
        raise ValueError("solar_wavelength_nm must be strictly increasing")
    if np.any(irradiance < 0):
        raise ValueError("solar_irradiance_w_m2_nm must be non-negative")
    low, high = SOLAR_NORMALISATION_BAND_NM
    if wavelength[0] > low or wavelength[-1] < high:
        raise ValueError(
            f"solar_wavelength_nm must cover the {low:g}-{high:g} nm normalisation band, "
            f"got [{wavelength[0]:g}, {wavelength[-1]:g}] nm"
        )
    return wavelength, irradiance


def _band_average(wavelength_nm, irradiance, low: float, high: float) -> float:
    """Mean of a tabulated spectrum over [low, high] [same units], trapezoid on the table's own nodes."""
    inside = (wavelength_nm > low) & (wavelength_nm < high)
    x = np.concatenate(([low], wavelength_nm[inside], [high]))
    y = np.interp(x, wavelength_nm, irradiance)
    return float(np.trapezoid(y, x) / (high - low))


def zodiacal_radiance(
    look_directions,
    wavelength_nm,
    solar_wavelength_nm,
    solar_irradiance_w_m2_nm,
    heliocentric_distance_au: float = 1.0,
    scale: float = 1.0,
    *,
    below_min_elongation: str = "clamp",
):
    """Zodiacal-light spectral radiance along look directions.

    Z(λ) = scale · Z_500(Δλ, β, r) · f_co(λ, ε) · F_sun(λ) / <F_sun>_490–510,
    with Z_500 from :func:`zodiacal_brightness_500nm`, f_co from
    :func:`zodiacal_colour_correction`, and F_sun linearly interpolated to λ.
    Table 17 of [1] is a broadband visual value at 500 nm, so the solar
    spectrum is normalised by its mean over 490–510 nm rather than by the
    single, line-affected sample at 500 nm (common practice).
    F_sun is the 1-AU spectrum: only its shape enters, the heliocentric
    distance scaling is inside Z_500.

    Parameters
    ----------
    look_directions : array_like, shape (3,) or (n, 3)
        Look vectors in the body-centred solar frame (+x toward the Sun,
        +z ecliptic north) [dimensionless]; normalised here.
    wavelength_nm : array_like
        Output wavelength(s), shape (W,) or scalar, in [200, 2500] [nm] and
        within the solar spectrum's range.
    solar_wavelength_nm : array_like, shape (m,)
        Wavelength grid of the solar spectrum, strictly increasing and
        covering 490–510 nm [nm].
    solar_irradiance_w_m2_nm : array_like, shape (m,)
        Solar spectral irradiance at 1 AU [W m⁻² nm⁻¹], non-negative.
    heliocentric_distance_au : float, optional
        Observer's distance from the Sun, in [0.3, 3] [AU]; default 1.
    scale : float, optional
        Non-negative multiplier on the whole background [dimensionless], e.g.
        a fitted zodiacal-light amplitude; default 1.
    below_min_elongation : {"clamp", "nan", "raise"}, optional
        Treatment of looks within 2° of the Sun, as in
        :func:`zodiacal_brightness_500nm`.

    Returns
    -------
    ndarray
        Spectral radiance [W m⁻² sr⁻¹ nm⁻¹], shape
        ``look_directions.shape[:-1] + wavelength.shape``: (n, W) for (n, 3)
        directions and (W,) wavelengths.

    References
    ----------
    .. [1] Leinert, Ch., et al. (1998), A&AS 127, 1, Table 17, Eq. 11, Eq. 22.
    .. [2] Hahn, J. M., Zook, H. A., Cooper, B., & Sunkara, B. (2002), Icarus 158, 360.
    .. [3] Leinert, Ch., Richter, I., Pitz, E., & Planck, B. (1981), A&A 103, 177.
    """
    scale_array = _finite_array(scale, "scale")
    if scale_array.ndim != 0 or scale_array < 0:
        raise ValueError(f"scale must be a non-negative scalar, got {scale!r}")
    sun_wavelength, sun_irradiance = _solar_spectrum(solar_wavelength_nm, solar_irradiance_w_m2_nm)
    wavelength = _in_range(wavelength_nm, "wavelength_nm", *WAVELENGTH_RANGE_NM, "nm")
    if wavelength.size and (wavelength.min() < sun_wavelength[0] or wavelength.max() > sun_wavelength[-1]):
        raise ValueError(
            f"wavelength_nm must lie within the solar spectrum's range "
            f"[{sun_wavelength[0]:g}, {sun_wavelength[-1]:g}] nm, got "
            f"[{wavelength.min():g}, {wavelength.max():g}] nm"
        )

    delta_longitude, latitude, elongation = ecliptic_coordinates_deg(look_directions)
    z500 = np.asarray(
        zodiacal_brightness_500nm(
            delta_longitude,
            latitude,
            heliocentric_distance_au,
            below_min_elongation=below_min_elongation,
        )
    )
    colour = zodiacal_colour_correction(wavelength, elongation)
    solar_shape = np.interp(wavelength, sun_wavelength, sun_irradiance) / _band_average(
        sun_wavelength, sun_irradiance, *SOLAR_NORMALISATION_BAND_NM
    )
    expand = z500.shape + (1,) * wavelength.ndim
    return float(scale_array) * z500.reshape(expand) * colour * solar_shape
