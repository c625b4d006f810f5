"""Benchmark: a full limb scan (columns + optics product) vs a straightforward reference.

200 lines of sight × 300 wavelengths × 2 populations (an exponential profile and a
TableProfile with terminator dependence; the geometry and densities of
bench_columns.py, demo values), extinction off.  dustrt: integrate_columns, then
optics at the rays' scattering angles and the DESIGN.md product.  Reference:
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

from dustrt.forward import radiance_from_columns  # noqa: E402
from dustrt.los import integrate_columns  # noqa: E402
from dustrt.materials import builtin_material  # noqa: E402
from dustrt.optics import population_optics  # noqa: E402
from dustrt.sizes import LogNormal, Monodisperse  # noqa: E402
from dustrt.sun import solar_irradiance  # noqa: E402

TOL = 1e-4


def optics_product(columns_sunlit, angles, wl):
    mats = [(builtin_material("mare_basaltic_analogue"), LogNormal(0.1, 1.5)),
            (builtin_material("highland_anorthositic_analogue"), Monodisperse(0.3))]
    uniq, inv = np.unique(angles, return_inverse=True)
    opt = [population_optics(m, s, wl, uniq) for m, s in mats]
    phase = np.stack([o.phase_function[:, inv].T for o in opt])
    csca = np.stack([o.scattering_cross_section_um2 for o in opt])
    return radiance_from_columns(solar_irradiance(wl), csca, csca, phase, columns_sunlit)


def main():
    observer, looks, profiles = build_case()
    wl = np.linspace(250.0, 1000.0, 300)
    angles = np.rad2deg(np.arccos(np.clip(looks[:, 0], -1, 1)))
    integrate_columns(observer, looks[:2], RADIUS_KM, TOP_KM, profiles, TOL, extinction=False)  # compile
    optics_product(np.ones((2, 2)), angles[:2], wl)  # compile the Mie kernels
    t0 = time.perf_counter()
    c = integrate_columns(observer, looks, RADIUS_KM, TOP_KM, profiles, TOL, extinction=False)
    fast = optics_product(c.sunlit_column_cm2, c.scattering_angle_deg, wl + 1e-9)
    t_fast = time.perf_counter() - t0
    t0 = time.perf_counter()
    ref_cols = np.stack([reference_sunlit(observer, looks, p, TOL) for p in profiles])
    ref = optics_product(ref_cols, angles, wl + 2e-9)
    t_ref = time.perf_counter() - t0
    ok = ref > 0
    diff = np.max(np.abs(fast[ok] / ref[ok] - 1))
    text = "\n".join([
        "dustrt limb benchmark: 200 lines of sight x 300 wavelengths x 2 populations (exponential + terminator table)",
        f"dustrt (columns + optics + product): {t_fast * 1e3:.0f} ms",
        f"reference (scipy quad per ray and population + same optics): {t_ref * 1e3:.0f} ms",
        f"speed ratio: {t_ref / t_fast:.1f}x (optics are computed inside both timings)",
        f"largest relative difference of the radiance: {diff:.2e}",
    ])
    print(text)
    Path(__file__).with_name("bench_limb_report.txt").write_text(text + "\n")


if __name__ == "__main__":
    main()
