"""Numba kernels for Mie scattering by homogeneous spheres.

Conventions follow Bohren & Huffman (1983), *Absorption and Scattering of
Light by Small Particles*, Appendix A (BHMIE): time dependence exp(-iωt),
refractive index m = n + ik with k >= 0 for absorbing material.

The loops over many sizes and wavelengths live inside the kernels; each
kernel fills output arrays passed in.  Nothing here validates input: the
Python API in :mod:`dustrt.mie` and :mod:`dustrt.optics` does.

References
----------
[1] Bohren, C. F. & Huffman, D. R. (1983), Appendix A.
[2] Wiscombe, W. J. (1979), NCAR/TN-140+STR: series length
    N = x + 4.05 x^(1/3) + 2 and downward recurrence for D_n.
"""

import numpy as np
from numba import njit, prange


@njit(cache=True)
def series_length(x):
    """Number of Mie terms for size parameter x ([2], Eq. 8.3)."""
    return int(x + 4.05 * x ** (1.0 / 3.0) + 2.0) + 1


@njit(cache=True)
def mie_coefficients(x, m, an, bn):
    """Fill an[0:N], bn[0:N] (orders 1..N) and return N.

    D_n(mx) and D_n(x) by downward recurrence (stable for absorbing and
    large spheres, [2]); psi_n from D_n(x) upward as psi_{n-1}/(D_n + n/x),
    which keeps full relative precision for tiny x where the plain upward
    recurrence of psi loses digits; chi_n by upward recurrence (stable, it
    grows).
    """
    nstop = series_length(x)
    mx = m * x
    # start well above both x and |mx|: near n ≈ |mx| the starting error of
    # the downward recurrence decays slowly for weakly absorbing spheres
    nmx = max(nstop, int(abs(mx))) + 16 + int(4.0 * abs(mx) ** (1.0 / 3.0))
    d_m = np.zeros(nmx + 1, dtype=np.complex128)
    d_x = np.zeros(nmx + 1, dtype=np.float64)
    for n in range(nmx, 0, -1):
        d_m[n - 1] = n / mx - 1.0 / (d_m[n] + n / mx)
        d_x[n - 1] = n / x - 1.0 / (d_x[n] + n / x)
    psi_prev = np.sin(x)  # psi_0
    chi_prev2 = -np.sin(x)  # chi_{-1}
    chi_prev = np.cos(x)  # chi_0
    xi_prev = psi_prev - 1j * chi_prev
    for n in range(1, nstop + 1):
        psi = psi_prev / (d_x[n] + n / x)
        chi = (2.0 * n - 1.0) / x * chi_prev - chi_prev2
        xi = psi - 1j * chi
        da = d_m[n] / m + n / x
        db = d_m[n] * m + n / x
        an[n - 1] = (da * psi - psi_prev) / (da * xi - xi_prev)
        bn[n - 1] = (db * psi - psi_prev) / (db * xi - xi_prev)
        psi_prev = psi
        chi_prev2 = chi_prev
        chi_prev = chi
        xi_prev = xi
    return nstop


@njit(cache=True)
def efficiencies(x, m, qext, qsca, gqsca):
    """Extinction, scattering efficiency and g*Qsca for sizes x[W, N] at index m[W].

    Outputs have the shape of x.  [1], Eqs. 4.61, 4.62 and 4.74.
    """
    nw, ns = x.shape
    nmax = series_length(x.max()) + 2
    an = np.zeros(nmax, dtype=np.complex128)
    bn = np.zeros(nmax, dtype=np.complex128)
    for j in range(nw):
        for i in range(ns):
            xi = x[j, i]
            nstop = mie_coefficients(xi, m[j], an, bn)
            se = 0.0
            ss = 0.0
            sg = 0.0
            for k in range(nstop):
                n = k + 1.0
                se += (2.0 * n + 1.0) * (an[k].real + bn[k].real)
                ss += (2.0 * n + 1.0) * (abs(an[k]) ** 2 + abs(bn[k]) ** 2)
                sg += (2.0 * n + 1.0) / (n * (n + 1.0)) * (an[k] * np.conj(bn[k])).real
                if k + 1 < nstop:
                    sg += n * (n + 2.0) / (n + 1.0) * (
                        an[k] * np.conj(an[k + 1]) + bn[k] * np.conj(bn[k + 1])
                    ).real
            qext[j, i] = 2.0 / xi**2 * se
            qsca[j, i] = 2.0 / xi**2 * ss
            gqsca[j, i] = 4.0 / xi**2 * sg


@njit(cache=True)
def angular_functions(mu, nmax, pi_n, tau_n):
    """Fill pi_n[a, n-1], tau_n[a, n-1] for n = 1..nmax ([1], Eqs. 4.46-4.47)."""
    for a in range(mu.size):
        p_prev2 = 0.0
        p_prev = 1.0
        pi_n[a, 0] = 1.0
        tau_n[a, 0] = mu[a]
        for k in range(1, nmax):
            n = k + 1.0
            p = ((2.0 * n - 1.0) * mu[a] * p_prev - n * p_prev2) / (n - 1.0)
            pi_n[a, k] = p
            tau_n[a, k] = n * mu[a] * p - (n + 1.0) * p_prev
            p_prev2 = p_prev
            p_prev = p


@njit(cache=True)
def amplitudes(x, m, mu, s1, s2):
    """Amplitude functions S1, S2 [A] for one sphere (BH convention, [1] Eq. 4.74)."""
    nstop = series_length(x)
    an = np.zeros(nstop + 2, dtype=np.complex128)
    bn = np.zeros(nstop + 2, dtype=np.complex128)
    mie_coefficients(x, m, an, bn)
    pi_n = np.zeros((mu.size, nstop))
    tau_n = np.zeros((mu.size, nstop))
    angular_functions(mu, nstop, pi_n, tau_n)
    for a in range(mu.size):
        z1 = 0.0j
        z2 = 0.0j
        for k in range(nstop):
            n = k + 1.0
            c = (2.0 * n + 1.0) / (n * (n + 1.0))
            z1 += c * (an[k] * pi_n[a, k] + bn[k] * tau_n[a, k])
            z2 += c * (an[k] * tau_n[a, k] + bn[k] * pi_n[a, k])
        s1[a] = z1
        s2[a] = z2


@njit(cache=True, parallel=True)
def weighted_intensities(x, m, weights, mu, i1_sum, i2_sum):
    """Accumulate sum_i weights[j, i] * |S1|^2 and |S2|^2 over sizes x[j, i].

    x: [W, N] size parameters; m: [W]; weights: [W, N]; mu: [A].
    Fills i1_sum, i2_sum [W, A].  The angular functions are computed once
    for the largest size and reused, so the cost per size is O(A * N_terms).
    Wavelengths run in parallel threads (each has its own output row).
    """
    nw, ns = x.shape
    nmax = series_length(x.max()) + 2
    pi_n = np.zeros((mu.size, nmax))
    tau_n = np.zeros((mu.size, nmax))
    angular_functions(mu, nmax, pi_n, tau_n)
    for j in prange(nw):
        an = np.zeros(nmax, dtype=np.complex128)
        bn = np.zeros(nmax, dtype=np.complex128)
        coeff_a = np.zeros(nmax, dtype=np.complex128)
        coeff_b = np.zeros(nmax, dtype=np.complex128)
        for a in range(mu.size):
            i1_sum[j, a] = 0.0
            i2_sum[j, a] = 0.0
        for i in range(ns):
            w = weights[j, i]
            if w == 0.0:
                continue
            nstop = mie_coefficients(x[j, i], m[j], an, bn)
            for k in range(nstop):
                n = k + 1.0
                c = (2.0 * n + 1.0) / (n * (n + 1.0))
                coeff_a[k] = c * an[k]
                coeff_b[k] = c * bn[k]
            for a in range(mu.size):
                z1r = 0.0
                z1i = 0.0
                z2r = 0.0
                z2i = 0.0
                for k in range(nstop):
                    p = pi_n[a, k]
                    t = tau_n[a, k]
                    ca = coeff_a[k]
                    cb = coeff_b[k]
                    z1r += ca.real * p + cb.real * t
                    z1i += ca.imag * p + cb.imag * t
                    z2r += ca.real * t + cb.real * p
                    z2i += ca.imag * t + cb.imag * p
                i1_sum[j, a] += w * (z1r * z1r + z1i * z1i)
                i2_sum[j, a] += w * (z2r * z2r + z2i * z2i)
