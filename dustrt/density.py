"""Grain number-density fields n(altitude, terminator distance) [cm^-3].

Every profile is a frozen dataclass with a vectorised numpy method
``density_cm3(altitude_km, terminator_distance_km)`` (the reference
implementation; the numba line-of-sight kernel re-implements it and is tested
against it). Each profile is linear in one *normalisation* parameter
(``surface_density_cm3`` for the analytic profiles, the dimensionless ``scale``
for tables), which upper-limit and sweep code vary via ``with_normalisation``.

Terminator distance d [km] is R (pi/2 - chi), positive on the sunlit side
(see :mod:`dustrt.geometry`). Below the surface (h < 0) densities are
irrelevant: rays stop at the surface.
"""

from __future__ import annotations

import csv
import dataclasses
import math
from collections import namedtuple
from pathlib import Path
from typing import ClassVar

import numpy as np

__all__ = [
    "ExponentialProfile",
    "PowerLawProfile",
    "TerminatorProfile",
    "TableProfile",
    "PROFILE_KINDS",
    "make_profile",
    "PackedProfiles",
    "pack_profiles",
    "KIND_EXPONENTIAL",
    "KIND_POWER_LAW",
    "KIND_TERMINATOR",
    "KIND_TABLE",
]

# Kind codes shared with dustrt._los_kernels.
KIND_EXPONENTIAL = 0
KIND_POWER_LAW = 1
KIND_TERMINATOR = 2
KIND_TABLE = 3
#: Number of float parameters per profile in PackedProfiles.params.
N_PACKED_PARAMS = 6
#: Largest density a table file may hold [cm^-3]: the scenario's bound on any number (config), far
#: above any physical dust density, and small enough that radiances and electron counts stay finite.
MAX_TABLE_DENSITY_CM3 = 1e30


def _finite_in(name: str, value, low: float, high: float, *, low_open=False, high_open=False) -> float:
    """Validate one scalar parameter and return it as float."""
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ValueError(f"{name} must be a real number, got {value!r}") from None
    ok = math.isfinite(v) and (v > low if low_open else v >= low) and (v < high if high_open else v <= high)
    if not ok:
        lo = "(" if low_open else "["
        hi = ")" if high_open else "]"
        raise ValueError(f"{name} must be finite and in {lo}{low:g}, {high:g}{hi}, got {value!r}")
    return v


class _ProfileMixin:
    """Shared helpers: normalisation and validated parameter replacement."""

    #: Name of the field the density is linear in.
    normalisation_parameter: ClassVar[str] = "surface_density_cm3"

    @property
    def normalisation(self) -> float:
        """Current value of the parameter the density is linear in."""
        return float(getattr(self, self.normalisation_parameter))

    def with_normalisation(self, value: float):
        """Copy with the normalisation parameter set to ``value`` (density scales linearly)."""
        return self.with_parameter(self.normalisation_parameter, value)

    def with_parameter(self, name: str, value):
        """Copy with one parameter replaced; validated like the constructor.

        Raises
        ------
        ValueError
            If ``name`` is not a parameter of this profile (the message lists them)
            or ``value`` is out of range.
        """
        names = [f.name for f in dataclasses.fields(self)]
        if name not in names:
            raise ValueError(f"{type(self).__name__} has no parameter {name!r}; known parameters: {', '.join(names)}")
        return dataclasses.replace(self, **{name: value})

    @staticmethod
    def _broadcast(altitude_km, terminator_distance_km):
        h = np.asarray(altitude_km, dtype=float)
        d = np.asarray(terminator_distance_km, dtype=float)
        return np.broadcast_arrays(h, d)


@dataclasses.dataclass(frozen=True)
class ExponentialProfile(_ProfileMixin):
    """Exponential in altitude, uniform in terminator distance.

    n(h) = n0 exp(-h / H)

    Parameters
    ----------
    surface_density_cm3 : float
        n0, density at the surface [cm^-3], >= 0.
    scale_height_km : float
        H [km], > 0.
    """

    surface_density_cm3: float
    scale_height_km: float

    def __post_init__(self):
        object.__setattr__(
            self, "surface_density_cm3", _finite_in("surface_density_cm3", self.surface_density_cm3, 0.0, math.inf)
        )
        object.__setattr__(
            self, "scale_height_km", _finite_in("scale_height_km", self.scale_height_km, 0.0, math.inf, low_open=True)
        )

    def density_cm3(self, altitude_km, terminator_distance_km=0.0) -> np.ndarray:
        """Density [cm^-3] at altitude [km] (terminator distance [km] ignored)."""
        h, _ = self._broadcast(altitude_km, terminator_distance_km)
        return self.surface_density_cm3 * np.exp(-h / self.scale_height_km)


@dataclasses.dataclass(frozen=True)
class PowerLawProfile(_ProfileMixin):
    """Power law in altitude, uniform in terminator distance.

    n(h) = n0 (1 + h / h_ref)^(-k)

    Parameters
    ----------
    surface_density_cm3 : float
        n0, density at the surface [cm^-3], >= 0.
    reference_altitude_km : float
        h_ref [km], > 0.
    exponent : float
        k, in [0, 20]; k = 0 gives a uniform density.
    """

    surface_density_cm3: float
    reference_altitude_km: float
    exponent: float

    def __post_init__(self):
        object.__setattr__(
            self, "surface_density_cm3", _finite_in("surface_density_cm3", self.surface_density_cm3, 0.0, math.inf)
        )
        object.__setattr__(
            self,
            "reference_altitude_km",
            _finite_in("reference_altitude_km", self.reference_altitude_km, 0.0, math.inf, low_open=True),
        )
        object.__setattr__(self, "exponent", _finite_in("exponent", self.exponent, 0.0, 20.0))

    def density_cm3(self, altitude_km, terminator_distance_km=0.0) -> np.ndarray:
        """Density [cm^-3] at altitude [km] (terminator distance [km] ignored)."""
        h, _ = self._broadcast(altitude_km, terminator_distance_km)
        # Clip keeps the base positive below the surface, where the value is never used.
        base = np.maximum(1.0 + h / self.reference_altitude_km, 1e-300)
        return self.surface_density_cm3 * base ** (-self.exponent)


@dataclasses.dataclass(frozen=True)
class TerminatorProfile(_ProfileMixin):
    """Exponential in altitude, peaked at the terminator with an asymmetric Gaussian.

    n(h, d) = n0 exp(-h/H) [f + (1 - f) exp(-(d - d0)^2 / (2 w^2))],
    w = w_sunlit for d >= d0, w = w_dark for d < d0.

    Parameters
    ----------
    surface_density_cm3 : float
        n0, surface density at the peak [cm^-3], >= 0.
    scale_height_km : float
        H [km], > 0.
    sunlit_width_km : float
        w_sunlit, Gaussian width on the sunlit side of the peak [km], > 0.
    dark_width_km : float
        w_dark, Gaussian width on the dark side of the peak [km], > 0.
    offset_km : float
        d0, terminator distance of the peak [km]; positive puts it on the sunlit side.
    floor_fraction : float
        f, in [0, 1): fraction of the peak density present far from the terminator.
    """

    surface_density_cm3: float
    scale_height_km: float
    sunlit_width_km: float
    dark_width_km: float
    offset_km: float = 0.0
    floor_fraction: float = 0.0

    def __post_init__(self):
        object.__setattr__(
            self, "surface_density_cm3", _finite_in("surface_density_cm3", self.surface_density_cm3, 0.0, math.inf)
        )
        for name in ("scale_height_km", "sunlit_width_km", "dark_width_km"):
            object.__setattr__(self, name, _finite_in(name, getattr(self, name), 0.0, math.inf, low_open=True))
        object.__setattr__(self, "offset_km", _finite_in("offset_km", self.offset_km, -math.inf, math.inf))
        object.__setattr__(
            self, "floor_fraction", _finite_in("floor_fraction", self.floor_fraction, 0.0, 1.0, high_open=True)
        )

    def density_cm3(self, altitude_km, terminator_distance_km) -> np.ndarray:
        """Density [cm^-3] at altitude [km] and terminator distance [km]."""
        h, d = self._broadcast(altitude_km, terminator_distance_km)
        x = d - self.offset_km
        w = np.where(x >= 0.0, self.sunlit_width_km, self.dark_width_km)
        shape = self.floor_fraction + (1.0 - self.floor_fraction) * np.exp(-0.5 * (x / w) ** 2)
        return self.surface_density_cm3 * np.exp(-h / self.scale_height_km) * shape


def _check_axis(values, what: str, where: str) -> np.ndarray:
    arr = np.asarray(values, dtype=float)
    if arr.ndim != 1:
        raise ValueError(f"{where}: {what} must be 1-D, got shape {arr.shape}")
    if arr.size < 2:
        raise ValueError(f"{where}: {what} needs at least two nodes, got {arr.size}")
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"{where}: {what} contains non-finite values")
    if not np.all(np.diff(arr) > 0.0):
        raise ValueError(f"{where}: {what} must be strictly increasing (sorted, no duplicates)")
    return arr


@dataclasses.dataclass(frozen=True, eq=False, init=False)
class TableProfile(_ProfileMixin):
    """Tabulated density on an (altitude, terminator distance) grid, bilinear in n.

    n(h, d) = scale * bilinear interpolation of the grid at (h, clamp(d)),
    and n = 0 for h outside [altitude_km[0], altitude_km[-1]]. The terminator
    distance is clamped to the table's edges (constant extrapolation in d).

    Parameters
    ----------
    altitude_km : array_like, shape (na,)
        Strictly increasing altitude nodes [km], na >= 2.
    terminator_distance_km : array_like, shape (nd,)
        Strictly increasing terminator-distance nodes [km], nd >= 2.
    density_grid_cm3 : array_like, shape (na, nd)
        Density at the nodes [cm^-3], finite and >= 0. May also be passed by the
        keyword ``density_cm3``; it is stored as ``density_grid_cm3`` because
        ``density_cm3`` is the evaluation method common to all profiles.
    scale : float
        Dimensionless factor multiplying the grid (the normalisation), >= 0.
    source : str
        Where the table came from (file name or note); informational.
    """

    altitude_km: np.ndarray
    terminator_distance_km: np.ndarray
    density_grid_cm3: np.ndarray
    scale: float = 1.0
    source: str = ""

    normalisation_parameter: ClassVar[str] = "scale"

    def __init__(
        self,
        altitude_km,
        terminator_distance_km,
        density_grid_cm3=None,
        scale: float = 1.0,
        source: str = "",
        *,
        density_cm3=None,
    ):
        if (density_grid_cm3 is None) == (density_cm3 is None):
            raise ValueError("TableProfile: give the density grid exactly once (density_grid_cm3 or density_cm3)")
        grid = density_grid_cm3 if density_grid_cm3 is not None else density_cm3
        source = str(source)
        where = f"TableProfile({source})" if source else "TableProfile"
        alt = _check_axis(altitude_km, "altitude_km", where)
        dist = _check_axis(terminator_distance_km, "terminator_distance_km", where)
        grid = np.asarray(grid, dtype=float)
        if grid.shape != (alt.size, dist.size):
            raise ValueError(
                f"{where}: density grid must have shape (altitude, terminator distance) = "
                f"({alt.size}, {dist.size}), got {grid.shape}"
            )
        if not np.all(np.isfinite(grid)) or np.any(grid < 0.0):
            raise ValueError(f"{where}: density grid (density_cm3) must be finite and >= 0")
        for name, arr in (("altitude_km", alt), ("terminator_distance_km", dist), ("density_grid_cm3", grid)):
            arr = np.array(arr, dtype=float, copy=True)
            arr.setflags(write=False)
            object.__setattr__(self, name, arr)
        object.__setattr__(self, "scale", _finite_in("scale", scale, 0.0, math.inf))
        object.__setattr__(self, "source", source)

    def __repr__(self) -> str:
        a, d = self.altitude_km, self.terminator_distance_km
        return (
            f"TableProfile(altitude_km=[{a[0]:g}..{a[-1]:g}] ({a.size} nodes), "
            f"terminator_distance_km=[{d[0]:g}..{d[-1]:g}] ({d.size} nodes), "
            f"scale={self.scale:g}, source={self.source!r})"
        )

    def density_cm3(self, altitude_km, terminator_distance_km) -> np.ndarray:
        """Density [cm^-3] at altitude [km] and terminator distance [km] (bilinear in n)."""
        h, d = self._broadcast(altitude_km, terminator_distance_km)
        alt = self.altitude_km
        dist = self.terminator_distance_km
        grid = self.density_grid_cm3
        inside = (h >= alt[0]) & (h <= alt[-1])
        hc = np.clip(h, alt[0], alt[-1])
        dc = np.clip(d, dist[0], dist[-1])
        i = np.clip(np.searchsorted(alt, hc, side="right") - 1, 0, alt.size - 2)
        j = np.clip(np.searchsorted(dist, dc, side="right") - 1, 0, dist.size - 2)
        th = (hc - alt[i]) / (alt[i + 1] - alt[i])
        td = (dc - dist[j]) / (dist[j + 1] - dist[j])
        val = (
            (1 - th) * (1 - td) * grid[i, j]
            + th * (1 - td) * grid[i + 1, j]
            + (1 - th) * td * grid[i, j + 1]
            + th * td * grid[i + 1, j + 1]
        )
        return np.where(inside, self.scale * val, 0.0)

    # -- readers -------------------------------------------------------------------
    def steepest_altitude_step(self) -> tuple[float, float, float]:
        """(ratio, lower km, upper km): the largest factor by which the density falls between
        adjacent altitude nodes (where both are > 0 and the larger is at least 1 % of the table's
        maximum: layers that contribute little are not flagged).  Linear interpolation in n over-weights
        the layer between two nodes by cosh(ln(ratio)/2) at its middle compared with an
        exponential fall (1.25 for a ratio of 4)."""
        g = self.density_grid_cm3
        lo, hi = g[:-1], g[1:]
        with np.errstate(divide="ignore", invalid="ignore"):
            matters = np.maximum(lo, hi) >= 0.01 * g.max()
            ratio = np.where((lo > 0) & (hi > 0) & matters, np.maximum(lo / hi, hi / lo), 1.0)
        if ratio.size == 0:
            return 1.0, float(self.altitude_km[0]), float(self.altitude_km[-1])
        i = int(np.argmax(ratio.max(axis=1)))
        return float(ratio[i].max()), float(self.altitude_km[i]), float(self.altitude_km[i + 1])

    @classmethod
    def from_file(cls, path, scale: float = 1.0) -> "TableProfile":
        """Read a table from ``.nc`` (netCDF-4) or ``.csv``, dispatching on the suffix."""
        path = Path(path)
        suffix = path.suffix.lower()
        if suffix in (".nc", ".nc4", ".netcdf", ".h5"):
            return cls.from_netcdf(path, scale=scale)
        if suffix in (".csv", ".txt"):
            return cls.from_csv(path, scale=scale)
        raise ValueError(f"{path}: unknown density table suffix {suffix!r}; known: .nc, .nc4, .netcdf, .h5, .csv, .txt")

    @classmethod
    def from_netcdf(cls, path, scale: float = 1.0) -> "TableProfile":
        """Read variable ``density_cm3`` with dimensions (``altitude_km``, ``terminator_distance_km``).

        The coordinate variables of the two dimensions give the nodes [km]; the file
        is read with xarray's h5netcdf engine.
        """
        import xarray as xr

        path = Path(path)
        try:
            ds = xr.open_dataset(path, engine="h5netcdf")
        except (OSError, ValueError) as exc:
            raise ValueError(f"{path}: cannot read as netCDF-4: {exc}") from None
        with ds:
            if "density_cm3" not in ds.variables:
                raise ValueError(f"{path}: variable 'density_cm3' not found; variables: {', '.join(map(str, ds.variables))}")
            var = ds["density_cm3"]
            dims = ("altitude_km", "terminator_distance_km")
            if set(var.dims) != set(dims):
                raise ValueError(f"{path}: variable 'density_cm3' must have dimensions {dims}, got {var.dims}")
            var = var.transpose(*dims)
            axes = []
            for dim in dims:
                if dim not in ds.coords:
                    raise ValueError(f"{path}: coordinate variable {dim!r} missing")
                axes.append(np.asarray(ds[dim].values, dtype=float))
            grid = np.asarray(var.values, dtype=float)
        _check_axis(axes[0], "coordinate 'altitude_km'", str(path))
        _check_axis(axes[1], "coordinate 'terminator_distance_km'", str(path))
        if not np.all(np.isfinite(grid)) or np.any(grid < 0.0):
            raise ValueError(f"{path}: variable 'density_cm3' must be finite and >= 0 (found NaN, inf or negative values)")
        if np.any(grid > MAX_TABLE_DENSITY_CM3):
            raise ValueError(f"{path}: variable 'density_cm3' must lie in [0, {MAX_TABLE_DENSITY_CM3:g}] cm-3, "
                             f"found {grid.max():g}")
        return cls(axes[0], axes[1], grid, scale=scale, source=str(path))

    @classmethod
    def from_csv(cls, path, scale: float = 1.0) -> "TableProfile":
        """Read one row per grid node: columns ``altitude_km``, ``terminator_distance_km``, ``density_cm3``.

        Lines starting with ``#`` are comments. The header names the columns (any
        order). The rows must form a complete grid, each node exactly once.
        """
        path = Path(path)
        required = ("altitude_km", "terminator_distance_km", "density_cm3")
        try:
            text = path.read_text(encoding="utf-8")
        except UnicodeDecodeError as exc:
            raise ValueError(f"{path}: not UTF-8 text ({exc.reason} at byte {exc.start})") from None
        except OSError as exc:
            raise ValueError(f"{path}: cannot read: {exc}") from None
        lines = [ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")]
        if not lines:
            raise ValueError(f"{path}: no header or data rows")
        rows = list(csv.reader(lines))
        header = [c.strip() for c in rows[0]]
        for col in required:
            if col not in header:
                raise ValueError(f"{path}: column {col!r} missing from header {header}")
        idx = [header.index(c) for c in required]
        data = {c: [] for c in required}
        for lineno, row in enumerate(rows[1:], start=2):
            if len(row) != len(header):
                raise ValueError(f"{path}: data row {lineno - 1} has {len(row)} fields, header has {len(header)}")
            for col, k in zip(required, idx):
                try:
                    data[col].append(float(row[k]))
                except ValueError:
                    raise ValueError(f"{path}: column {col!r}, data row {lineno - 1}: not a number: {row[k]!r}") from None
        arrays = {c: np.asarray(v) for c, v in data.items()}
        if arrays["density_cm3"].size == 0:
            raise ValueError(f"{path}: no data rows")
        for col in required:
            if not np.all(np.isfinite(arrays[col])):
                raise ValueError(f"{path}: column {col!r} contains non-finite values")
        if np.any(arrays["density_cm3"] < 0.0):
            raise ValueError(f"{path}: column 'density_cm3' contains negative values")
        if np.any(arrays["density_cm3"] > MAX_TABLE_DENSITY_CM3):
            raise ValueError(f"{path}: column 'density_cm3' must lie in [0, {MAX_TABLE_DENSITY_CM3:g}] cm-3, "
                             f"found {arrays['density_cm3'].max():g}")
        alt = np.unique(arrays["altitude_km"])
        dist = np.unique(arrays["terminator_distance_km"])
        for col, ax in (("altitude_km", alt), ("terminator_distance_km", dist)):
            if ax.size < 2:
                raise ValueError(f"{path}: column {col!r} needs at least two distinct nodes, got {ax.size}")
        ia = np.searchsorted(alt, arrays["altitude_km"])
        jd = np.searchsorted(dist, arrays["terminator_distance_km"])
        count = np.zeros((alt.size, dist.size), dtype=int)
        np.add.at(count, (ia, jd), 1)
        if np.any(count > 1):
            a, d = np.argwhere(count > 1)[0]
            raise ValueError(
                f"{path}: columns 'altitude_km', 'terminator_distance_km': duplicate node ({alt[a]:g}, {dist[d]:g})"
            )
        if np.any(count == 0):
            a, d = np.argwhere(count == 0)[0]
            raise ValueError(
                f"{path}: columns 'altitude_km', 'terminator_distance_km' do not form a complete grid: "
                f"node ({alt[a]:g}, {dist[d]:g}) missing ({int(np.sum(count == 0))} missing in all)"
            )
        grid = np.empty((alt.size, dist.size))
        grid[ia, jd] = arrays["density_cm3"]
        return cls(alt, dist, grid, scale=scale, source=str(path))


#: Profile classes by the short names used in scenarios.
PROFILE_KINDS = {
    "exponential": ExponentialProfile,
    "power_law": PowerLawProfile,
    "terminator": TerminatorProfile,
    "table": TableProfile,
}


def make_profile(kind: str, **parameters):
    """Build a profile from its short name and parameters.

    ``kind`` is one of :data:`PROFILE_KINDS` (for "table", pass ``path`` to read a
    file with :meth:`TableProfile.from_file`, optionally with ``scale``).

    Raises
    ------
    ValueError
        For an unknown kind (the message lists the known ones) or bad parameters.
    """
    if kind not in PROFILE_KINDS:
        raise ValueError(f"unknown density profile kind {kind!r}; known kinds: {', '.join(PROFILE_KINDS)}")
    cls = PROFILE_KINDS[kind]
    if kind == "table" and "path" in parameters:
        extra = set(parameters) - {"path", "scale"}
        if extra:
            raise ValueError(f"table profile read from a file takes only 'path' and 'scale', got {sorted(extra)}")
        return TableProfile.from_file(parameters["path"], scale=parameters.get("scale", 1.0))
    names = [f.name for f in dataclasses.fields(cls)]
    unknown = set(parameters) - set(names) - ({"density_cm3"} if kind == "table" else set())
    if unknown:
        raise ValueError(f"{kind} profile: unknown parameter(s) {sorted(unknown)}; known: {', '.join(names)}")
    try:
        return cls(**parameters)
    except TypeError as exc:
        raise ValueError(f"{kind} profile: {exc}; parameters: {', '.join(names)}") from None


PackedProfiles = namedtuple("PackedProfiles", ["kinds", "params", "table_index", "table_altitude_km",
                                               "table_distance_km", "table_density_cm3"])
PackedProfiles.__doc__ = """Profiles flattened into plain arrays for the numba kernels.

Fields
------
kinds : int64[P]
    KIND_EXPONENTIAL, KIND_POWER_LAW, KIND_TERMINATOR or KIND_TABLE.
params : float64[P, 6]
    exponential: (n0, H); power law: (n0, h_ref, k);
    terminator: (n0, H, w_sunlit, w_dark, d0, f); table: (scale,). Unused slots are 0.
table_index : int64[P, 5]
    For tables: (altitude offset, n altitude, distance offset, n distance, value offset)
    into the concatenated arrays below; zeros otherwise.
table_altitude_km, table_distance_km : float64[*]
    Concatenated table axes [km].
table_density_cm3 : float64[*]
    Concatenated grids, each flattened row-major (altitude, distance) [cm^-3], unscaled.
"""


def pack_profiles(profiles) -> PackedProfiles:
    """Flatten a sequence of profiles into a :class:`PackedProfiles` of plain arrays."""
    profiles = list(profiles)
    if not profiles:
        raise ValueError("profiles must contain at least one density profile")
    n = len(profiles)
    kinds = np.zeros(n, dtype=np.int64)
    params = np.zeros((n, N_PACKED_PARAMS), dtype=np.float64)
    index = np.zeros((n, 5), dtype=np.int64)
    alts, dists, vals = [], [], []
    na_tot = nd_tot = nv_tot = 0
    for k, prof in enumerate(profiles):
        if isinstance(prof, ExponentialProfile):
            kinds[k] = KIND_EXPONENTIAL
            params[k, :2] = (prof.surface_density_cm3, prof.scale_height_km)
        elif isinstance(prof, PowerLawProfile):
            kinds[k] = KIND_POWER_LAW
            params[k, :3] = (prof.surface_density_cm3, prof.reference_altitude_km, prof.exponent)
        elif isinstance(prof, TerminatorProfile):
            kinds[k] = KIND_TERMINATOR
            params[k, :] = (
                prof.surface_density_cm3,
                prof.scale_height_km,
                prof.sunlit_width_km,
                prof.dark_width_km,
                prof.offset_km,
                prof.floor_fraction,
            )
        elif isinstance(prof, TableProfile):
            kinds[k] = KIND_TABLE
            params[k, 0] = prof.scale
            a, d, g = prof.altitude_km, prof.terminator_distance_km, prof.density_grid_cm3
            index[k] = (na_tot, a.size, nd_tot, d.size, nv_tot)
            alts.append(a)
            dists.append(d)
            vals.append(g.ravel())
            na_tot += a.size
            nd_tot += d.size
            nv_tot += g.size
        else:
            raise ValueError(
                f"profiles[{k}] is a {type(prof).__name__}; expected one of "
                f"{', '.join(c.__name__ for c in PROFILE_KINDS.values())}"
            )

    def cat(parts):
        return np.ascontiguousarray(np.concatenate(parts) if parts else np.zeros(0), dtype=np.float64)

    return PackedProfiles(kinds, params, index, cat(alts), cat(dists), cat(vals))


def reference_density_cm3(profile) -> float:
    """The profile's density normalisation expressed in grains per cm³.

    Analytic profiles: ``surface_density_cm3`` (the density at the surface, at the
    terminator peak for the terminator profile).  Table profiles: the largest density
    of the scaled grid.  Radiance is linear in this number, so limits and detectability
    on it are limits on the whole profile shape scaled up or down.
    """
    if isinstance(profile, TableProfile):
        return float(profile.scale * np.max(profile.density_grid_cm3))
    return float(profile.surface_density_cm3)
