"""Refractive-index models m(λ) = n + ik of grain materials (k >= 0 absorbs).

Three kinds: a constant index, a table of n, k vs wavelength read from CSV
(linear interpolation of n and k separately, no extrapolation), and built-in
materials shipped as package data.

Built-in materials
------------------
All built-in tables come from the amorphous-silicate (glass) optical constants
of Dorschner et al. (1995) [1], shipped in ``data/silicate_glass_nk_dorschner1995.csv``
with its provenance header.  Every column of that file is available by its
name (``pyroxene_glass_x0.7`` …, where x is the Mg fraction of
Mg(x)Fe(1-x)SiO3, and ``olivine_glass_y0.5`` …).  Three lunar analogues are
named for convenience; choosing an analogue is a modelling choice, documented
here so that users can make another:

``highland_anorthositic_analogue``
    Fe-free pyroxene glass MgSiO3 (x = 1.0): nearly transparent, n ≈ 1.58 in
    the visible.  Plagioclase (anorthite) has a similar real index
    (n ≈ 1.58, recalled from memory) and Fe-poor highland grains absorb weakly.
``mare_basaltic_analogue``
    Fe-rich pyroxene glass Mg0.4Fe0.6SiO3 (x = 0.4): mafic, absorbing in the
    UV, like Fe-bearing pyroxene-rich mare soil grains.
``agglutinate_glass_analogue``
    Fe-rich olivine glass (y = 0.4): the most absorbing glass in [1], standing
    in for the dark, glass-rich agglutinate fraction of mature soil.

References
----------
[1] Dorschner, J., Begemann, B., Henning, Th., Jäger, C. & Mutschke, H.
    (1995), A&A 300, 503.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import lru_cache
from importlib import resources
from pathlib import Path

import numpy as np

from dustrt.io import read_csv_table

_GLASS_FILE = "silicate_glass_nk_dorschner1995.csv"

#: Lunar analogue name -> column prefix in the Dorschner et al. (1995) table.
LUNAR_ANALOGUES = {
    "highland_anorthositic_analogue": "pyroxene_glass_x1.0",
    "mare_basaltic_analogue": "pyroxene_glass_x0.4",
    "agglutinate_glass_analogue": "olivine_glass_y0.4",
}


@dataclass(frozen=True)
class Material:
    """A refractive-index model.

    ``wavelength_nm`` holds the table nodes (a single NaN-free node pair is not
    allowed: constants use an empty table and ``constant_index``).
    """

    name: str
    wavelength_nm: tuple = ()
    n: tuple = ()
    k: tuple = ()
    constant_index: complex | None = None
    source: str = field(default="", compare=False)

    def __post_init__(self):
        if self.constant_index is not None:
            m = complex(self.constant_index)
            _check_nk(np.array([m.real]), np.array([m.imag]), f"material {self.name!r}")
            return
        wl = np.asarray(self.wavelength_nm, dtype=float)
        if wl.size < 2:
            raise ValueError(f"material {self.name!r}: a table needs at least two wavelengths")
        if not np.all(np.isfinite(wl)) or np.any(np.diff(wl) <= 0):
            raise ValueError(
                f"material {self.name!r}: wavelength_nm must be finite and strictly increasing"
            )
        _check_nk(np.asarray(self.n, float), np.asarray(self.k, float), f"material {self.name!r}")

    @property
    def wavelength_range_nm(self) -> tuple[float, float]:
        if self.constant_index is not None:
            return (0.0, np.inf)
        return (self.wavelength_nm[0], self.wavelength_nm[-1])

    def refractive_index(self, wavelength_nm) -> np.ndarray:
        """m = n + ik at the given wavelengths [nm] (complex array, k >= 0)."""
        wl = np.atleast_1d(np.asarray(wavelength_nm, dtype=float))
        if self.constant_index is not None:
            return np.full(wl.shape, complex(self.constant_index))
        lo, hi = self.wavelength_range_nm
        bad = (wl < lo) | (wl > hi) | ~np.isfinite(wl)
        if np.any(bad):
            raise ValueError(
                f"material {self.name!r} ({self.source or 'table'}) covers {lo:g}-{hi:g} nm; "
                f"wavelength {wl[bad][0]:g} nm is outside it"
            )
        n = np.interp(wl, self.wavelength_nm, self.n)
        k = np.interp(wl, self.wavelength_nm, self.k)
        return n + 1j * k


def _check_nk(n: np.ndarray, k: np.ndarray, where: str) -> None:
    if not (np.all(np.isfinite(n)) and np.all(np.isfinite(k))):
        raise ValueError(f"{where}: n and k must be finite")
    if np.any(n <= 0) or np.any(n > 10):
        raise ValueError(f"{where}: n must lie in (0, 10]")
    if np.any(k < 0) or np.any(k > 10):
        raise ValueError(f"{where}: k must lie in [0, 10] (m = n + ik, k >= 0 absorbs)")


def constant_material(n: float, k: float = 0.0) -> Material:
    """A wavelength-independent refractive index m = n + ik."""
    return Material(name=f"constant n={n:g} k={k:g}", constant_index=complex(n, k))


def read_material_csv(path: str | Path, name: str | None = None) -> Material:
    """Read a table with columns ``wavelength_nm, n, k`` (``#`` lines are comments)."""
    path = Path(path)
    try:
        t = read_csv_table(path, ("wavelength_nm", "n", "k"))
    except ValueError as exc:  # the message starts with the path
        raise ValueError(f"material table {exc}") from None
    try:
        return Material(name=name or path.stem, wavelength_nm=tuple(t["wavelength_nm"]), n=tuple(t["n"]),
                        k=tuple(t["k"]), source=str(path))
    except ValueError as exc:
        raise ValueError(f"material table {path}: {exc}") from None


@lru_cache(maxsize=1)
def _glass_table() -> dict[str, np.ndarray]:
    with resources.as_file(resources.files("dustrt") / "data" / _GLASS_FILE) as p:
        return read_csv_table(Path(p))


def builtin_material_names() -> list[str]:
    """Names accepted by :func:`builtin_material`."""
    cols = _glass_table()
    glasses = sorted({c[:-2] for c in cols if c.endswith("_n")})
    return sorted(LUNAR_ANALOGUES) + glasses


def builtin_material(name: str) -> Material:
    """A built-in material by name (see the module docstring)."""
    cols = _glass_table()
    prefix = LUNAR_ANALOGUES.get(name, name)
    if f"{prefix}_n" not in cols:
        raise ValueError(
            f"unknown material {name!r}; built-in materials are: "
            + ", ".join(builtin_material_names())
        )
    return Material(
        name=name,
        wavelength_nm=tuple(cols["wavelength_nm"]),
        n=tuple(cols[f"{prefix}_n"]),
        k=tuple(cols[f"{prefix}_k"]),
        source=f"Dorschner et al. (1995), A&A 300, 503: {prefix}",
    )
