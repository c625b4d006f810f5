"""Single-sphere Mie scattering: the public, validated face of the kernels.

Refractive index m = n + ik with k >= 0 for absorbing material (DESIGN.md).
Amplitudes follow Bohren & Huffman (1983): dC_sca/dΩ = (|S1|² + |S2|²)/(2k²)
for unpolarised light, S1 perpendicular and S2 parallel to the scattering
plane.  (Wiscombe's MIEV0 and miepython use the complex conjugates.)

References
----------
[1] Bohren, C. F. & Huffman, D. R. (1983), *Absorption and Scattering of
    Light by Small Particles*, Wiley, ch. 4 and Appendix A.
[2] Wiscombe, W. J. (1979), NCAR Technical Note NCAR/TN-140+STR.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: Largest size parameter accepted: beyond this the series is long and
#: geometric optics would be the better model anyway.
MAX_SIZE_PARAMETER = 2.0e5


def _check_index(m: complex) -> complex:
    m = complex(m)
    if not (np.isfinite(m.real) and np.isfinite(m.imag)) or m.real <= 0:
        raise ValueError(f"refractive index real part must be finite and > 0, got {m}")
    if m.imag < 0:
        raise ValueError(
            f"refractive index imaginary part k must be >= 0 (m = n + ik convention), got {m}"
        )
    return m


def _check_size_parameter(x: np.ndarray) -> np.ndarray:
    x = np.asarray(x, dtype=np.float64)
    if not np.all(np.isfinite(x)) or np.any(x <= 0) or np.any(x > MAX_SIZE_PARAMETER):
        raise ValueError(f"size parameter must lie in (0, {MAX_SIZE_PARAMETER:g}]")
    return x


@dataclass(frozen=True)
class SphereEfficiencies:
    """Efficiencies of single spheres (dimensionless)."""

    extinction: np.ndarray
    scattering: np.ndarray
    asymmetry_parameter: np.ndarray

    @property
    def absorption(self) -> np.ndarray:
        return self.extinction - self.scattering


def sphere_efficiencies(size_parameter, refractive_index: complex) -> SphereEfficiencies:
    """Q_ext, Q_sca and g for spheres of one refractive index.

    Parameters
    ----------
    size_parameter : array_like
        x = 2π a / λ [dimensionless], any shape.
    refractive_index : complex
        m = n + ik relative to the surrounding vacuum, k >= 0.
    """
    from dustrt import _mie_kernels as kern

    m = _check_index(refractive_index)
    x = _check_size_parameter(size_parameter)
    flat = np.atleast_1d(x).reshape(1, -1)
    qext = np.empty_like(flat)
    qsca = np.empty_like(flat)
    gq = np.empty_like(flat)
    kern.efficiencies(flat, np.array([m]), qext, qsca, gq)
    shape = x.shape
    return SphereEfficiencies(
        extinction=qext.reshape(shape),
        scattering=qsca.reshape(shape),
        asymmetry_parameter=(gq / qsca).reshape(shape),
    )


def sphere_amplitudes(size_parameter: float, refractive_index: complex, scattering_angle_deg):
    """Amplitude functions (S1, S2) of one sphere at the given scattering angles [deg]."""
    from dustrt import _mie_kernels as kern

    m = _check_index(refractive_index)
    x = float(_check_size_parameter(size_parameter))
    theta = np.atleast_1d(np.asarray(scattering_angle_deg, dtype=np.float64))
    if np.any(theta < 0) or np.any(theta > 180) or not np.all(np.isfinite(theta)):
        raise ValueError("scattering_angle_deg must lie in [0, 180]")
    mu = np.cos(np.deg2rad(theta))
    s1 = np.empty(mu.size, dtype=np.complex128)
    s2 = np.empty(mu.size, dtype=np.complex128)
    kern.amplitudes(x, m, mu, s1, s2)
    return s1, s2
