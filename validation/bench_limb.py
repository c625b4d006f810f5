"""Benchmark: a full limb scan (columns + optics product) vs a straightforward reference.

200 lines of sight × 300 wavelengths × 2 populations (an exponential profile and a
TableProfile with terminator dependence; the geometry and densities of
bench_columns.py, demo values), extinction off.  dustrt: integrate_columns, then
optics at the rays' scattering angles and the radiance product of docs/conventions.md.  Reference:
scipy.integrate.quad per line of sight and population (bench_columns.reference_sunlit,
epsrel equal to the tolerance), then the same optics product.  Prints the speed
ratio and the largest relative difference of the radiance; writes bench_limb_report.txt.

Run:  python validation/bench_limb.py
"""

import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).parent))
from bench_columns import RADIUS_KM, TOP_KM, build_case, reference_sunlit  # noqa: E402
from machine import write_bench_json  # noqa: E402

from dustrt.forward import radiance_from_columns  # noqa: E402
from dustrt.los import integrate_columns  # noqa: E402
from dustrt.materials import builtin_material  # noqa: E402
from dustrt.optics import population_optics  # noqa: E402
from dustrt.sizes import LogNormal, Monodisperse  # noqa: E402
from dustrt.sun import solar_irradiance  # noqa: E402

TOL = 1e-4


def population_optics_at(angles, wl):
    """Optics of the two bench populations at the given scattering angles: (phase (P, L, W), C_sca (P, W))."""
    mats = [(builtin_material("mare_basaltic_analogue"), LogNormal(0.1, 1.5)),
            (builtin_material("highland_anorthositic_analogue"), Monodisperse(0.3))]
    uniq, inv = np.unique(angles, return_inverse=True)
    opt = [population_optics(m, s, wl, uniq) for m, s in mats]
    phase = np.stack([o.phase_function[:, inv].T for o in opt])
    csca = np.stack([o.scattering_cross_section_um2 for o in opt])
    return phase, csca


def product(columns_sunlit, phase, csca, wl):
    return radiance_from_columns(solar_irradiance(wl), csca, csca, phase, columns_sunlit)


def main():
    observer, looks, profiles = build_case()
    wl = np.linspace(250.0, 1000.0, 300)
    angles = np.rad2deg(np.arccos(np.clip(looks[:, 0], -1, 1)))
    integrate_columns(observer, looks[:2], RADIUS_KM, TOP_KM, profiles, TOL, extinction=False)  # compile
    population_optics_at(angles[:2], wl[:3])  # compile the Mie kernels

    # (a) the line-of-sight part and the optics product, optics computed once beforehand (shared)
    phase, csca = population_optics_at(angles, wl)
    t0 = time.perf_counter()
    c = integrate_columns(observer, looks, RADIUS_KM, TOP_KM, profiles, TOL, extinction=False)
    fast = product(c.sunlit_column_cm2, phase, csca, wl)
    t_fast = time.perf_counter() - t0
    t0 = time.perf_counter()
    ref_cols = np.stack([reference_sunlit(observer, looks, p, TOL) for p in profiles])
    ref = product(ref_cols, phase, csca, wl)
    t_ref = time.perf_counter() - t0
    # (b) the whole pipeline, optics at every line of sight's exact angle included in both timings
    t0 = time.perf_counter()
    phase2, csca2 = population_optics_at(angles, wl + 1e-9)  # +1e-9: bypass the optics cache
    product(c.sunlit_column_cm2, phase2, csca2, wl)
    t_optics = time.perf_counter() - t0
    ok = ref > 0
    diff = np.max(np.abs(fast[ok] / ref[ok] - 1))
    text = "\n".join([
        "dustrt limb benchmark: 200 lines of sight x 300 wavelengths x 2 populations (exponential + terminator table)",
        f"(a) columns + optics product: dustrt {t_fast * 1e3:.1f} ms, reference (scipy quad per ray and "
        f"population + same product) {t_ref * 1e3:.0f} ms, speed ratio {t_ref / t_fast:.0f}x",
        f"(b) with optics at the 200 exact scattering angles computed inside both timings ({t_optics * 1e3:.0f} ms): "
        f"speed ratio {(t_ref + t_optics) / (t_fast + t_optics):.0f}x",
        f"largest relative difference of the radiance: {diff:.2e} (the reference's own error at epsrel {TOL:g}; "
        "see bench_columns_report.txt)",
    ])
    print(text)
    Path(__file__).with_name("bench_limb_report.txt").write_text(text + "\n")
    write_bench_json(
        "bench_limb", t_ref / t_fast, "(a) scipy quad per ray + product / integrate_columns + product",
        {"dustrt": t_fast, "reference": t_ref, "optics_at_exact_angles": t_optics},
        {"radiance": diff},
        {"ratio_full_pipeline": (t_ref + t_optics) / (t_fast + t_optics),
         "case": "200 lines of sight x 300 wavelengths x 2 populations"})


if __name__ == "__main__":
    main()
