"""Grain size distributions and their quadrature rules.

Each distribution is a number density per unit radius f(a) [µm⁻¹] with unit
integral over its radius range.  ``quadrature(n_panels)`` returns radii and
weights such that ∫ f(a) g(a) da ≈ Σ w_i g(a_i); the integral is done in
ln a with composite Gauss–Legendre panels, which resolves both the small-grain
tail (C_sca ∝ a⁶) and Mie resonance ripple once enough panels are used.

Default lognormal bounds
------------------------
When a lognormal has no explicit bounds, the range is
``ln a ∈ [ln a_med − Z s, ln a_med + 6 s² + Z s]`` with s = ln σ_g and Z = 4.5.
Weighting a lognormal by a⁶ (the Rayleigh C_sca) shifts it by 6 s² in ln a
and keeps its width, so this range holds all but ≈ 2·3.4e-6 of both the number
and the a⁶-weighted scattering (one-sided Gaussian tail beyond 4.5σ); larger
grains weight C_sca more weakly (a² to a⁶), so they are covered too.  The
bounds used are recorded in the optics output.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
from scipy.special import erf

#: Gaussian tail width (in units of ln σ_g) of default lognormal bounds.
LOGNORMAL_TAIL_Z = 4.5
MIN_RADIUS_UM = 1.0e-4
MAX_RADIUS_UM = 1.0e3
_GL_ORDER = 8


def _check_radius(value, name):
    if not np.isfinite(value) or not (MIN_RADIUS_UM <= value <= MAX_RADIUS_UM):
        raise ValueError(f"{name} must lie in [{MIN_RADIUS_UM:g}, {MAX_RADIUS_UM:g}] µm, got {value}")


def _gl_panels(log_lo: float, log_hi: float, n_panels: int):
    """Nodes and weights of composite Gauss–Legendre on [log_lo, log_hi]."""
    edges = np.linspace(log_lo, log_hi, n_panels + 1)
    nodes, weights = gauss_legendre_panels(edges[:-1], edges[1:])
    return nodes.ravel(), weights.ravel()


def gauss_legendre_panels(lo, hi):
    """Gauss–Legendre nodes and weights (P, order) on panels [lo_p, hi_p]."""
    t, w = np.polynomial.legendre.leggauss(_GL_ORDER)
    lo = np.asarray(lo, dtype=float)
    hi = np.asarray(hi, dtype=float)
    half = 0.5 * (hi - lo)
    mid = 0.5 * (hi + lo)
    return mid[:, None] + half[:, None] * t[None, :], half[:, None] * w[None, :]


def panel_quadrature(size, log_lo, log_hi):
    """Radii [µm] and weights (P, order) for ∫ f(a) g(a) da over ln-a panels."""
    u, w = gauss_legendre_panels(log_lo, log_hi)
    a = np.exp(u)
    return a, w * a * size.number_density(a)


@dataclass(frozen=True)
class Monodisperse:
    """All grains of one radius [µm]."""

    radius_um: float
    kind = "monodisperse"

    def __post_init__(self):
        _check_radius(self.radius_um, "radius_um")

    @property
    def bounds_um(self) -> tuple[float, float]:
        return (self.radius_um, self.radius_um)

    @property
    def characteristic_radius_um(self) -> float:
        return self.radius_um

    def with_radius(self, radius_um: float) -> "Monodisperse":
        return replace(self, radius_um=float(radius_um))

    def number_density(self, radius_um):
        raise ValueError("a monodisperse distribution has no density per unit radius")

    def quadrature(self, n_panels: int = 1):
        return np.array([self.radius_um]), np.array([1.0])


@dataclass(frozen=True)
class LogNormal:
    """f(a) ∝ exp(−(ln(a/a_med))² / (2 ln² σ_g)) / a on [min, max] (unit number)."""

    median_radius_um: float
    sigma_g: float
    min_radius_um: float | None = None
    max_radius_um: float | None = None
    kind = "lognormal"

    def __post_init__(self):
        _check_radius(self.median_radius_um, "median_radius_um")
        if not np.isfinite(self.sigma_g) or not (1.0 < self.sigma_g <= 10.0):
            raise ValueError(f"sigma_g must lie in (1, 10], got {self.sigma_g}")
        for name in ("min_radius_um", "max_radius_um"):
            v = getattr(self, name)
            if v is not None:
                _check_radius(v, name)
        lo, hi = self.bounds_um
        if not lo < hi:
            raise ValueError(f"min_radius_um ({lo:g}) must be below max_radius_um ({hi:g})")

    @property
    def bounds_um(self) -> tuple[float, float]:
        s = np.log(self.sigma_g)
        mu = np.log(self.median_radius_um)
        lo = self.min_radius_um
        hi = self.max_radius_um
        if lo is None:
            lo = max(MIN_RADIUS_UM, float(np.exp(mu - LOGNORMAL_TAIL_Z * s)))
        if hi is None:
            hi = min(MAX_RADIUS_UM, float(np.exp(mu + 6 * s * s + LOGNORMAL_TAIL_Z * s)))
        return (float(lo), float(hi))

    @property
    def characteristic_radius_um(self) -> float:
        return self.median_radius_um

    def with_radius(self, radius_um: float) -> "LogNormal":
        """Copy with a new median; explicit bounds move with it (same ratios to the median),
        default bounds follow from the new median."""
        f = float(radius_um) / self.median_radius_um
        lo = None if self.min_radius_um is None else self.min_radius_um * f
        hi = None if self.max_radius_um is None else self.max_radius_um * f
        return replace(self, median_radius_um=float(radius_um), min_radius_um=lo, max_radius_um=hi)

    def _norm(self) -> float:
        s = np.log(self.sigma_g)
        lo, hi = np.log(self.bounds_um) - np.log(self.median_radius_um)
        # ∫ exp(−u²/2s²) du over [lo, hi] (u = ln a − ln a_med)
        return float(s * np.sqrt(np.pi / 2) * (erf(hi / (s * np.sqrt(2))) - erf(lo / (s * np.sqrt(2)))))

    def number_density(self, radius_um):
        a = np.asarray(radius_um, dtype=float)
        lo, hi = self.bounds_um
        s = np.log(self.sigma_g)
        f = np.exp(-np.log(a / self.median_radius_um) ** 2 / (2 * s * s)) / a / self._norm()
        return np.where((a >= lo) & (a <= hi), f, 0.0)

    def quadrature(self, n_panels: int):
        lo, hi = self.bounds_um
        u, w = _gl_panels(np.log(lo), np.log(hi), n_panels)
        a = np.exp(u)
        return a, w * a * self.number_density(a)  # da = a d(ln a)


@dataclass(frozen=True)
class PowerLaw:
    """dN/da ∝ a^(−slope) on [min, max] (unit number)."""

    min_radius_um: float
    max_radius_um: float
    slope: float
    kind = "power-law"

    def __post_init__(self):
        _check_radius(self.min_radius_um, "min_radius_um")
        _check_radius(self.max_radius_um, "max_radius_um")
        if not self.min_radius_um < self.max_radius_um:
            raise ValueError("min_radius_um must be below max_radius_um")
        if not np.isfinite(self.slope) or not (-10.0 <= self.slope <= 10.0):
            raise ValueError(f"slope must lie in [-10, 10], got {self.slope}")

    @property
    def bounds_um(self) -> tuple[float, float]:
        return (self.min_radius_um, self.max_radius_um)

    @property
    def characteristic_radius_um(self) -> float:
        return self.min_radius_um

    def with_radius(self, radius_um: float) -> "PowerLaw":
        """Not defined: a power law has no single characteristic radius to sweep."""
        raise ValueError("a radius_um sweep applies to monodisperse (radius) and lognormal (median) "
                         "populations; for a power law sweep its bounds by dotted key, e.g. "
                         "'population.NAME.size.max_radius_um'")

    def _norm(self) -> float:
        lo, hi = self.bounds_um
        p = 1.0 - self.slope
        if abs(p) < 1e-12:
            return float(np.log(hi / lo))
        return float((hi**p - lo**p) / p)

    def number_density(self, radius_um):
        a = np.asarray(radius_um, dtype=float)
        lo, hi = self.bounds_um
        return np.where((a >= lo) & (a <= hi), a ** (-self.slope) / self._norm(), 0.0)

    def quadrature(self, n_panels: int):
        lo, hi = self.bounds_um
        u, w = _gl_panels(np.log(lo), np.log(hi), n_panels)
        a = np.exp(u)
        return a, w * a * self.number_density(a)


def mean_volume_um3(size, n_panels: int = 64) -> float:
    """Mean grain volume ⟨4πa³/3⟩ [µm³] of a size distribution (composite Gauss–Legendre in ln a).

    The a³ weight is smooth over the distribution's bounds, so 64 panels of
    order 8 are far beyond convergence (tested against the closed forms).
    """
    a, w = size.quadrature(n_panels)
    return float(np.sum(w * (4.0 / 3.0) * np.pi * a**3))


SizeDistribution = Monodisperse | LogNormal | PowerLaw
DISTRIBUTIONS = {"monodisperse": Monodisperse, "lognormal": LogNormal, "power-law": PowerLaw}
