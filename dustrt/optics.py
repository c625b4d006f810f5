"""Optics of grain populations: size-averaged Mie cross sections and phase functions.

For a size distribution f(a) with unit number (``dustrt.sizes``):

    C_x(λ) = ∫ f(a) π a² Q_x(a, λ) da                 [µm² per grain]
    dC_sca/dΩ(θ, λ) = ∫ f(a) (|S1|² + |S2|²) / (2k²) da
    P(θ, λ) = 4π · (dC_sca/dΩ) / C_sca                 (∫ P dΩ = 4π)
    DoLP(θ, λ) = (⟨|S1|²⟩ − ⟨|S2|²⟩) / (⟨|S1|²⟩ + ⟨|S2|²⟩)   (> 0: perpendicular)

with k = 2π/λ and ⟨·⟩ the same size average (scattering weighted).  The size
integral uses composite Gauss–Legendre panels in ln a, doubling the panels
until C_sca and C_ext change by less than the requested relative tolerance at
every wavelength; the phase function is then evaluated on the accepted nodes.

References
----------
[1] Bohren, C. F. & Huffman, D. R. (1983), *Absorption and Scattering of Light
    by Small Particles*, Wiley, §4.4 (cross sections), §3.3 (Stokes matrix).
[2] Hansen, J. E. & Travis, L. D. (1974), Space Sci. Rev. 16, 527: size-averaged
    single-scattering properties.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from dustrt import warn
from dustrt.materials import Material
from dustrt.sizes import Monodisperse, SizeDistribution, panel_quadrature

DEFAULT_RELATIVE_TOLERANCE = 1e-4
_START_PANELS = 4
_MAX_DEPTH = 12
# The difference coarse-vs-halves measures the coarse panel's error; the accepted
# halves are far better (8-point Gauss–Legendre error falls ~2^-16 per halving for
# smooth integrands), so the criterion on the difference may be looser than rtol.
# tests/test_optics.py checks the achieved error against a tight reference.
_ACCEPT_FACTOR = 10.0


@dataclass(frozen=True)
class PopulationOptics:
    """Size-averaged optics of one grain population on a wavelength × angle grid.

    Arrays: cross sections [µm² per grain] (W,), phase function and degree of
    linear polarisation (W, A).
    """

    wavelength_nm: np.ndarray
    scattering_angle_deg: np.ndarray
    extinction_cross_section_um2: np.ndarray
    scattering_cross_section_um2: np.ndarray
    asymmetry_parameter: np.ndarray
    phase_function: np.ndarray
    degree_of_linear_polarization: np.ndarray
    min_radius_um: float
    max_radius_um: float
    n_size_nodes: int
    converged_relative_change: float

    @property
    def absorption_cross_section_um2(self) -> np.ndarray:
        return self.extinction_cross_section_um2 - self.scattering_cross_section_um2

    @property
    def single_scattering_albedo(self) -> np.ndarray:
        return self.scattering_cross_section_um2 / self.extinction_cross_section_um2


def _cross_sections(radius_um, weights, wavelength_nm, m, per_node=False):
    """Weighted C_ext, C_sca, g·C_sca [µm²]: sums (W,), or per node (W, N) if per_node."""
    from dustrt import _mie_kernels as kern

    wl_um = wavelength_nm * 1e-3
    x = 2 * np.pi * radius_um[None, :] / wl_um[:, None]
    qext = np.empty_like(x)
    qsca = np.empty_like(x)
    gq = np.empty_like(x)
    kern.efficiencies(x, m, qext, qsca, gq)
    geo = weights * np.pi * radius_um**2
    if per_node:
        return qext * geo, qsca * geo, gq * geo
    return qext @ geo, qsca @ geo, gq @ geo


def _panel_sums(size, lo, hi, wavelength_nm, m):
    """Per-panel C_ext, C_sca, g·C_sca (P, W) plus the panels' radii and weights (P, 8)."""
    a, w = panel_quadrature(size, lo, hi)
    cext, csca, gc = _cross_sections(a.ravel(), w.ravel(), wavelength_nm, m, per_node=True)
    npan, order = a.shape
    sums = [c.reshape(-1, npan, order).sum(axis=2).T for c in (cext, csca, gc)]
    return sums, a, w


def _converged_nodes(size: SizeDistribution, wavelength_nm, m, rtol):
    """Adaptive ln-a panels until C_sca and C_ext are converged at every wavelength.

    Each open panel is compared with its two halves (8-point Gauss–Legendre
    each).  A panel is accepted when the difference, relative to the
    population total at every wavelength, is below rtol times the panel's
    share of the ln-a range, so the summed error stays below rtol.  Tail
    panels, which carry little of C_sca, are accepted early; resonance
    structure of large grains is refined where it matters.  Returns the
    accepted halves' nodes and weights, the cross sections (W,) and the
    estimated relative error.
    """
    if isinstance(size, Monodisperse):
        a, w = size.quadrature()
        return a, w, _cross_sections(a, w, wavelength_nm, m), 0.0
    log_lo, log_hi = np.log(size.bounds_um)
    span = log_hi - log_lo
    edges = np.linspace(log_lo, log_hi, _START_PANELS + 1)
    lo, hi = edges[:-1], edges[1:]
    coarse, _, _ = _panel_sums(size, lo, hi, wavelength_nm, m)
    done = [np.zeros(wavelength_nm.size) for _ in range(3)]
    nodes, weights = [], []
    error = 0.0
    for depth in range(_MAX_DEPTH + 1):
        n = lo.size
        mid = 0.5 * (lo + hi)
        halves, a2, w2 = _panel_sums(
            size, np.concatenate([lo, mid]), np.concatenate([mid, hi]), wavelength_nm, m
        )
        fine = [h[:n] + h[n:] for h in halves]
        total = [d + f.sum(axis=0) for d, f in zip(done, fine)]
        err = np.maximum(
            np.max(np.abs(fine[0] - coarse[0]) / np.abs(total[0]), axis=1),
            np.max(np.abs(fine[1] - coarse[1]) / np.abs(total[1]), axis=1),
        )
        ok = err < _ACCEPT_FACTOR * rtol * (hi - lo) / span
        if error + float(np.sum(err)) < rtol:
            # global control: the remaining open panels' (coarse) errors already fit the budget;
            # this stops the chase of ultra-narrow resonances of non-absorbing spheres
            ok[:] = True
        if depth == _MAX_DEPTH and not ok.all():
            warn(
                f"size quadrature not converged to {rtol:g} after {depth} panel halvings; "
                "results may be inaccurate"
            )
            ok[:] = True
        both = np.concatenate([ok, ok])
        nodes.append(a2[both].ravel())
        weights.append(w2[both].ravel())
        done = [d + f[ok].sum(axis=0) for d, f in zip(done, fine)]
        error += float(np.sum(err[ok]))
        if ok.all():
            break
        split = np.concatenate([~ok, ~ok])
        lo = np.concatenate([lo, mid])[split]
        hi = np.concatenate([mid, hi])[split]
        coarse = [h[split] for h in halves]
    return np.concatenate(nodes), np.concatenate(weights), tuple(done), error


def population_optics(
    material: Material,
    size: SizeDistribution,
    wavelength_nm,
    scattering_angle_deg,
    relative_tolerance: float = DEFAULT_RELATIVE_TOLERANCE,
) -> PopulationOptics:
    """Size-averaged optics of one population (cached within a run).

    Parameters
    ----------
    material : Material
        Refractive index model m(λ) = n + ik.
    size : SizeDistribution
        Number distribution of grain radius.
    wavelength_nm : array_like
        Vacuum wavelengths [nm], > 0.
    scattering_angle_deg : array_like
        Scattering angles [deg] in [0, 180].
    relative_tolerance : float
        Convergence target of the size quadrature on C_sca and C_ext.
    """
    wl = np.asarray(wavelength_nm, dtype=float).ravel()
    th = np.asarray(scattering_angle_deg, dtype=float).ravel()
    if wl.size == 0 or not np.all(np.isfinite(wl)) or np.any(wl <= 0):
        raise ValueError("wavelength_nm must be finite and > 0")
    if th.size == 0 or not np.all(np.isfinite(th)) or np.any(th < 0) or np.any(th > 180):
        raise ValueError("scattering_angle_deg must lie in [0, 180]")
    if not (1e-10 <= relative_tolerance <= 1e-1):
        raise ValueError("relative_tolerance must lie in [1e-10, 0.1]")
    return _population_optics_cached(
        material, size, tuple(wl), tuple(th), float(relative_tolerance)
    )


@lru_cache(maxsize=256)
def _population_optics_cached(material, size, wl_t, th_t, rtol) -> PopulationOptics:
    from dustrt import _mie_kernels as kern

    wl = np.array(wl_t)
    th = np.array(th_t)
    m = material.refractive_index(wl)
    a, w, (cext, csca, gcsca), change = _converged_nodes(size, wl, m, rtol)
    k_um = 2 * np.pi / (wl * 1e-3)
    weights = w[None, :] / k_um[:, None] ** 2
    x = 2 * np.pi * a[None, :] / (wl[:, None] * 1e-3)
    i1 = np.empty((wl.size, th.size))
    i2 = np.empty((wl.size, th.size))
    kern.weighted_intensities(x, m, np.ascontiguousarray(weights), np.cos(np.deg2rad(th)), i1, i2)
    phase = 4 * np.pi * 0.5 * (i1 + i2) / csca[:, None]
    dolp = (i1 - i2) / (i1 + i2)
    out = PopulationOptics(
        wavelength_nm=wl,
        scattering_angle_deg=th,
        extinction_cross_section_um2=cext,
        scattering_cross_section_um2=csca,
        asymmetry_parameter=gcsca / csca,
        phase_function=phase,
        degree_of_linear_polarization=dolp,
        min_radius_um=float(size.bounds_um[0]),
        max_radius_um=float(size.bounds_um[1]),
        n_size_nodes=int(a.size),
        converged_relative_change=float(change),
    )
    for arr in (cext, csca, phase, dolp, out.asymmetry_parameter):
        arr.setflags(write=False)  # shared through the cache
    return out


def phase_function_at(optics: PopulationOptics, scattering_angle_deg) -> np.ndarray:
    """Phase function (W, n) at arbitrary angles, interpolated in angle.

    Linear interpolation in angle of ln P: the grid must be fine enough for
    the forward peak of large grains (the forward model computes optics at
    the exact scattering angles of its lines of sight instead).
    """
    th = np.asarray(scattering_angle_deg, dtype=float)
    logp = np.log(optics.phase_function)
    out = np.empty((optics.wavelength_nm.size, th.size))
    for j in range(optics.wavelength_nm.size):
        out[j] = np.exp(np.interp(th, optics.scattering_angle_deg, logp[j]))
    return out


def optics_dataset(populations, wavelength_nm, scattering_angle_deg,
                   relative_tolerance: float = DEFAULT_RELATIVE_TOLERANCE, progress=None):
    """Optics of named populations as an xarray Dataset (CF-style units and long names).

    Parameters
    ----------
    populations : sequence of objects with ``name``, ``material`` and ``size``
        (e.g. :class:`dustrt.config.Population`).
    wavelength_nm, scattering_angle_deg : array_like
        Grids [nm], [deg].
    progress : callable, optional
        Called with the population name before each population is computed.
    """
    import xarray as xr

    import dustrt

    results = []
    for p in populations:
        if progress is not None:
            progress(p.name)
        results.append(population_optics(p.material, p.size, wavelength_nm, scattering_angle_deg,
                                          relative_tolerance))
    names = [p.name for p in populations]
    wl = results[0].wavelength_nm
    th = results[0].scattering_angle_deg

    def stack(attr):
        return np.stack([getattr(r, attr) for r in results])

    pw = ("population", "wavelength_nm")
    pwa = ("population", "wavelength_nm", "scattering_angle_deg")
    ds = xr.Dataset(
        {
            "extinction_cross_section": (pw, stack("extinction_cross_section_um2"),
                                         {"units": "um2", "long_name": "size-averaged extinction cross section per grain"}),
            "scattering_cross_section": (pw, stack("scattering_cross_section_um2"),
                                         {"units": "um2", "long_name": "size-averaged scattering cross section per grain"}),
            "absorption_cross_section": (pw, stack("absorption_cross_section_um2"),
                                         {"units": "um2", "long_name": "size-averaged absorption cross section per grain"}),
            "single_scattering_albedo": (pw, stack("single_scattering_albedo"),
                                         {"units": "1", "long_name": "single-scattering albedo"}),
            "asymmetry_parameter": (pw, stack("asymmetry_parameter"),
                                    {"units": "1", "long_name": "asymmetry parameter (mean cosine of scattering angle)"}),
            "phase_function": (pwa, stack("phase_function"),
                               {"units": "1", "long_name": "scattering phase function normalised to 4 pi over the sphere"}),
            "degree_of_linear_polarization": (
                pwa, stack("degree_of_linear_polarization"),
                {"units": "1", "long_name": "degree of linear polarization (|S1|^2-|S2|^2)/(|S1|^2+|S2|^2), "
                                            "positive when perpendicular polarization dominates"}),
            "min_radius_um": ("population", np.array([r.min_radius_um for r in results]),
                              {"units": "um", "long_name": "lower bound of the size integral"}),
            "max_radius_um": ("population", np.array([r.max_radius_um for r in results]),
                              {"units": "um", "long_name": "upper bound of the size integral"}),
            "size_quadrature_nodes": ("population", np.array([r.n_size_nodes for r in results]),
                                      {"units": "1", "long_name": "number of radius nodes of the size quadrature"}),
            "size_quadrature_error": ("population", np.array([r.converged_relative_change for r in results]),
                                      {"units": "1", "long_name": "conservative bound on the relative error of the size quadrature "
                                                                  "(sum of coarse-panel differences; C_sca, C_ext, worst wavelength)"}),
        },
        coords={
            "population": ("population", names, {"long_name": "grain population"}),
            "wavelength_nm": ("wavelength_nm", wl, {"units": "nm", "long_name": "vacuum wavelength"}),
            "scattering_angle_deg": ("scattering_angle_deg", th,
                                     {"units": "degree", "long_name": "scattering angle (0 = forward)"}),
        },
        attrs={
            "title": "dustrt grain-population optics (Mie theory)",
            "dustrt_version": dustrt.__version__,
            "size_quadrature_relative_tolerance": relative_tolerance,
            "refractive_index_convention": "m = n + ik, k >= 0 absorbing",
            "materials": "; ".join(f"{p.name}: {p.material.name} ({p.material.source or 'constant'})"
                                   for p in populations),
            "size_distributions": "; ".join(f"{p.name}: {p.size!r}" for p in populations),
            "size_bounds_um": "; ".join(f"{p.name}: {r.min_radius_um:.6g}-{r.max_radius_um:.6g}"
                                        for p, r in zip(populations, results)),
        },
    )
    return ds
