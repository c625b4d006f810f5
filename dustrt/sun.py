"""Solar spectral irradiance: the embedded ASTM E-490 table and distance scaling.

The built-in spectrum is the ASTM E-490-00a air-mass-zero standard (2000,
reapproved 2006) at 1 AU, 199.5–1100 nm, shipped in
``data/solar_e490_200-1100nm.csv`` with its provenance header.  Model
wavelengths are sampled by averaging the 1-nm-class table over each model
wavelength's cell (half-way to its neighbours), which conserves the integrated
irradiance when the model grid is coarser than the table; a finer model grid
interpolates linearly.
"""

from __future__ import annotations

from functools import lru_cache
from importlib import resources
from pathlib import Path

import numpy as np

from dustrt.io import read_csv_table

BUILTIN_FILE = "solar_e490_200-1100nm.csv"
COLUMNS = ("wavelength_nm", "irradiance_w_m2_nm")
#: Plausibility bound on a tabulated spectrum at 1 AU [W m^-2 nm^-1]: the E-490 peak is about 2.2.
MAX_IRRADIANCE_W_M2_NM = 1000.0


@lru_cache(maxsize=8)
def _read(path: str) -> tuple[np.ndarray, np.ndarray]:
    t = read_csv_table(path, COLUMNS)
    wl, f = t["wavelength_nm"], t["irradiance_w_m2_nm"]
    if wl.size < 2 or np.any(np.diff(wl) <= 0):
        raise ValueError(f"{path}: column 'wavelength_nm' must be strictly increasing with >= 2 rows")
    if np.any(f <= 0):
        raise ValueError(f"{path}: column 'irradiance_w_m2_nm' must be > 0 (sunlight has no zero bins "
                         "in the UV-visible)")
    if np.any(f > MAX_IRRADIANCE_W_M2_NM):
        raise ValueError(f"{path}: column 'irradiance_w_m2_nm' must lie in (0, {MAX_IRRADIANCE_W_M2_NM:g}] W m-2 nm-1 "
                         f"at 1 AU, found {f.max():g} (the Sun peaks near 2; larger values suggest other units, "
                         "e.g. mW or per um)")
    wl.setflags(write=False)
    f.setflags(write=False)
    return wl, f


def solar_table(spectrum: str | Path = "builtin") -> tuple[np.ndarray, np.ndarray]:
    """The tabulated spectrum at 1 AU: (wavelength [nm], irradiance [W m⁻² nm⁻¹])."""
    if str(spectrum) == "builtin":
        with resources.as_file(resources.files("dustrt") / "data" / BUILTIN_FILE) as p:
            return _read(str(p))
    return _read(str(Path(spectrum)))


def solar_irradiance(wavelength_nm, spectrum: str | Path = "builtin", distance_au: float = 1.0) -> np.ndarray:
    """Solar spectral irradiance [W m⁻² nm⁻¹] at the model wavelengths and distance (∝ 1/d²)."""
    if not (np.isfinite(distance_au) and distance_au > 0):
        raise ValueError(f"distance_au must be finite and > 0, got {distance_au}")
    wl = np.atleast_1d(np.asarray(wavelength_nm, dtype=float))
    tw, tf = solar_table(spectrum)
    name = "the built-in ASTM E-490 spectrum" if str(spectrum) == "builtin" else str(spectrum)
    if wl.min() < tw[0] or wl.max() > tw[-1]:
        raise ValueError(f"{name} covers {tw[0]:g}-{tw[-1]:g} nm; model wavelengths "
                         f"{wl.min():g}-{wl.max():g} nm reach outside it")
    if wl.size == 1:
        return np.interp(wl, tw, tf) / distance_au**2
    edges = np.concatenate([[wl[0] - 0.5 * (wl[1] - wl[0])], 0.5 * (wl[1:] + wl[:-1]),
                            [wl[-1] + 0.5 * (wl[-1] - wl[-2])]])
    edges = np.clip(edges, tw[0], tw[-1])
    # cumulative trapezoid integral of the table, evaluated at the cell edges
    cum = np.concatenate([[0.0], np.cumsum(0.5 * (tf[1:] + tf[:-1]) * np.diff(tw))])

    def integral_to(x):
        i = np.clip(np.searchsorted(tw, x, side="right") - 1, 0, tw.size - 2)
        t = x - tw[i]
        slope = (tf[i + 1] - tf[i]) / (tw[i + 1] - tw[i])
        return cum[i] + tf[i] * t + 0.5 * slope * t * t

    width = np.diff(edges)
    cell_mean = (integral_to(edges[1:]) - integral_to(edges[:-1])) / np.where(width > 0, width, 1.0)
    point = np.interp(wl, tw, tf)
    # cells narrower than the table spacing: plain interpolation is the better estimate
    spacing = np.interp(wl, tw[1:], np.diff(tw))
    out = np.where(width > spacing, cell_mean, point)
    return out / distance_au**2
