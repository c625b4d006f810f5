"""Benchmark: population optics vs a plain per-radius loop over the miepython library.

Case: one lognormal population (median 0.1 µm, σ_g = 1.5, mare basaltic analogue),
300 wavelengths (250-1000 nm) and 181 scattering angles, converged to 1e-4.
The reference uses the same radius nodes and weights as dustrt (so both do the
same size integral) and calls miepython (numba JIT enabled) once per radius for
the efficiencies (vectorised over wavelength) and once per radius and wavelength
for the amplitudes, then forms the same weighted sums.  Prints timings, the
speed ratio and the largest relative differences; writes bench_optics_report.txt.

Run:  python validation/bench_optics.py
"""

import os
import time
from pathlib import Path

os.environ.setdefault("MIEPYTHON_USE_JIT", "1")  # must be set before importing miepython

import miepython  # noqa: E402
import numpy as np  # noqa: E402
from machine import write_bench_json  # noqa: E402  (validation/machine.py, beside this script)

from dustrt.materials import builtin_material  # noqa: E402
from dustrt.optics import _converged_nodes, population_optics  # noqa: E402
from dustrt.sizes import LogNormal  # noqa: E402


def reference(radius_um, weights, wl_nm, m, theta_deg):
    mu = np.cos(np.deg2rad(theta_deg))
    csca = np.zeros(wl_nm.size)
    cext = np.zeros(wl_nm.size)
    i_sum = np.zeros((wl_nm.size, mu.size))
    k = 2 * np.pi / (wl_nm * 1e-3)
    for a, w in zip(radius_um, weights):
        x = 2 * np.pi * a / (wl_nm * 1e-3)
        qext, qsca, _qback, _g = miepython.efficiencies_mx(np.conj(m), x)  # miepython: m = n - ik
        csca += w * np.pi * a * a * qsca
        cext += w * np.pi * a * a * qext
        for j in range(wl_nm.size):
            s1, s2 = miepython.S1_S2(np.conj(m[j]), x[j], mu, norm="wiscombe")
            i_sum[j] += w * 0.5 * (np.abs(s1) ** 2 + np.abs(s2) ** 2) / k[j] ** 2
    return cext, csca, 4 * np.pi * i_sum / csca[:, None]


def main():
    mat = builtin_material("mare_basaltic_analogue")
    size = LogNormal(0.1, 1.5)
    wl = np.linspace(250.0, 1000.0, 300)
    th = np.linspace(0.0, 180.0, 181)
    population_optics(mat, size, wl[:3], th[:3])  # compile
    t0 = time.perf_counter()
    o = population_optics(mat, size, wl + 1e-9, th)  # +1e-9: bypass the cache
    t_fast = time.perf_counter() - t0
    m = mat.refractive_index(wl + 1e-9)
    a, w, _, _ = _converged_nodes(size, wl + 1e-9, m, 1e-4)
    reference(a[:1], w[:1], wl[:2], m[:2], th)  # compile miepython
    t0 = time.perf_counter()
    cext, csca, phase = reference(a, w, wl + 1e-9, m, th)
    t_ref = time.perf_counter() - t0
    lines = [
        "dustrt optics benchmark: lognormal 0.1 um, sigma_g 1.5, 300 wavelengths x 181 angles",
        f"size nodes: {a.size}",
        f"dustrt population_optics (warm): {t_fast * 1e3:.0f} ms",
        f"reference loop over radii with miepython {miepython.__version__} (JIT): {t_ref * 1e3:.0f} ms",
        f"speed ratio: {t_ref / t_fast:.1f}x",
        f"max rel diff C_sca: {np.max(np.abs(o.scattering_cross_section_um2 / csca - 1)):.2e}",
        f"max rel diff C_ext: {np.max(np.abs(o.extinction_cross_section_um2 / cext - 1)):.2e}",
        f"max rel diff phase function: {np.max(np.abs(o.phase_function / phase - 1)):.2e}",
    ]
    text = "\n".join(lines)
    print(text)
    Path(__file__).with_name("bench_optics_report.txt").write_text(text + "\n")
    write_bench_json(
        "bench_optics", t_ref / t_fast, "per-radius miepython loop / dustrt population_optics (warm)",
        {"dustrt": t_fast, "reference": t_ref},
        {"C_sca": np.max(np.abs(o.scattering_cross_section_um2 / csca - 1)),
         "C_ext": np.max(np.abs(o.extinction_cross_section_um2 / cext - 1)),
         "phase_function": np.max(np.abs(o.phase_function / phase - 1))},
        {"case": "lognormal 0.1 um, sigma_g 1.5, 300 wavelengths x 181 angles", "size_nodes": int(a.size)})


if __name__ == "__main__":
    main()
