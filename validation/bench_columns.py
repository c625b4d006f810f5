"""Benchmark: dustrt.los.integrate_columns vs a straightforward scipy reference.

200 limb lines of sight from an invented orbiter (demo values: 100 km altitude,
local time 6.5 h, tangent altitudes 0.5-95 km, azimuths 0 deg (sunward, fully sunlit)
and 180 deg (anti-sunward, crossing into the shadow)), two populations:

- an exponential profile (n0 = 1e-2 cm^-3, H = 10 km; demo values),
- a TableProfile with terminator dependence (41 x 21 nodes, built here; demo values).

Reference: scipy.integrate.quad per line of sight and population on each sunlit
segment (found with dustrt.geometry, numpy), epsrel equal to the integrator's
relative_tolerance, the tangent point passed as a break point. A tight reference
(epsrel = 1e-10, table-node crossings as break points) on a subset of rays, plus the
ray where the two differ most, measures the accuracy both achieve. The extinction
weights are compared with a run at relative_tolerance 1e-8 (weights then aimed at 1e-6;
that setting agrees with nested brute-force quadrature in tests/test_los.py).

Run:  python validation/bench_columns.py [--tolerance 1e-4]
Writes validation/bench_columns_report.txt beside this script.
"""

from __future__ import annotations

import argparse
import time
from pathlib import Path

import numpy as np
from scipy import integrate, optimize

from dustrt import geometry as geo
from dustrt.density import ExponentialProfile, TableProfile
from dustrt.los import KM_TO_CM, integrate_columns
from machine import write_bench_json  # validation/machine.py, beside this script

RADIUS_KM = 1737.4  # IAU mean lunar radius
TOP_KM = 250.0


def build_case():
    """Observer, 200 look directions and the two demo populations."""
    observer = geo.observer_position_km(RADIUS_KM, 100.0, latitude_deg=0.0, local_time_h=6.5)
    tangent = np.linspace(0.5, 95.0, 100)
    looks = np.concatenate(
        [
            geo.limb_look_directions(observer, RADIUS_KM, tangent, azimuth_deg=0.0),
            geo.limb_look_directions(observer, RADIUS_KM, tangent, azimuth_deg=180.0),
        ]
    )
    alt = np.linspace(0.0, 200.0, 41)
    dist = np.linspace(-300.0, 300.0, 21)
    grid = np.exp(-alt[:, None] / 15.0) * (0.2 + np.exp(-0.5 * (dist[None, :] / 100.0) ** 2))
    profiles = [ExponentialProfile(1e-2, 10.0), TableProfile(alt, dist, 1e-2 * grid, source="bench demo table")]
    return observer, looks, profiles


def sunlit_segments(observer, look):
    """Sunlit sub-intervals [km] of the modelled part of one ray (numpy geometry)."""
    s0, s1, _ = geo.ray_segment_km(observer, look[None, :], RADIUS_KM, TOP_KM)
    s0, s1 = float(s0[0]), float(s1[0])
    d0, d1 = geo.shadow_cylinder_crossings_km(observer, look[None, :], RADIUS_KM)
    d0, d1 = float(d0[0]), float(d1[0])
    if np.isnan(d0):
        return [(s0, s1)] if s1 > s0 else []
    segs = [(s0, min(s1, d0)), (max(s0, d1), s1)]
    return [(a, b) for a, b in segs if b > a]


def node_crossings(observer, look, profile, a, b):
    """Ray parameters in (a, b) [km] where the ray crosses the table's altitude and distance nodes."""
    bq = float(observer @ look)
    c0 = float(observer @ observer)
    out = []
    for h in profile.altitude_km:
        disc = bq * bq - (c0 - (RADIUS_KM + h) ** 2)
        if disc > 0:
            out += [s for s in (-bq - np.sqrt(disc), -bq + np.sqrt(disc)) if a < s < b]

    def d_of(s):
        return float(geo.terminator_distance_km(observer + s * look, RADIUS_KM))

    grid = np.linspace(a, b, 2001)
    vals = np.array([d_of(s) for s in grid])
    for dk in profile.terminator_distance_km:  # sampled and bracketed, independent of the kernel's cones
        f = vals - dk
        for i in np.nonzero(np.sign(f[:-1]) * np.sign(f[1:]) < 0)[0]:
            out.append(optimize.brentq(lambda s: d_of(s) - dk, grid[i], grid[i + 1], xtol=1e-12))
    return out


def reference_sunlit(observer, looks, profile, epsrel, node_breaks=False):
    """Sunlit columns [cm^-2] by scipy.integrate.quad on each sunlit segment."""
    out = np.zeros(len(looks))
    for k, look in enumerate(looks):
        s_tan = -float(observer @ look)

        def f(s):
            p = observer + s * look
            h = np.linalg.norm(p) - RADIUS_KM
            d = RADIUS_KM * np.arcsin(np.clip(p[0] / np.linalg.norm(p), -1, 1))
            return float(profile.density_cm3(h, d))

        total = 0.0
        for a, b in sunlit_segments(observer, look):
            pts = [s_tan] if a < s_tan < b else []
            if node_breaks and isinstance(profile, TableProfile):
                pts += node_crossings(observer, look, profile, a, b)
            val, _ = integrate.quad(f, a, b, points=sorted(pts) or None, epsrel=epsrel, epsabs=0.0, limit=500)
            total += val
        out[k] = total * KM_TO_CM
    return out


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--tolerance", type=float, default=1e-4)
    parser.add_argument("--tight-subset", type=int, default=20, help="rays checked against the epsrel=1e-10 reference")
    args = parser.parse_args(argv)
    tol = args.tolerance
    observer, looks, profiles = build_case()

    integrate_columns(observer, looks[:2], RADIUS_KM, TOP_KM, profiles, tol)  # compile (cached) outside timing
    t0 = time.perf_counter()
    res = integrate_columns(observer, looks, RADIUS_KM, TOP_KM, profiles, tol, extinction=False)
    t_fast = time.perf_counter() - t0
    t0 = time.perf_counter()
    res_ext = integrate_columns(observer, looks, RADIUS_KM, TOP_KM, profiles, tol, extinction=True)
    t_ext = time.perf_counter() - t0

    res_tight = integrate_columns(observer, looks, RADIUS_KM, TOP_KM, profiles, 1e-8, extinction=True)
    ext_err = {
        part: np.max(np.abs(getattr(res_ext, name) / getattr(res_tight, name) - 1.0))
        for part, name in (("K", "extinction_weight_cm4"), ("sun part", "extinction_weight_sun_cm4"),
                           ("observer part", "extinction_weight_observer_cm4"))
    }

    t0 = time.perf_counter()
    ref = np.array([reference_sunlit(observer, looks, p, tol) for p in profiles])
    t_ref = time.perf_counter() - t0

    mask = ref > 0
    rel = np.abs(res.sunlit_column_cm2[mask] / ref[mask] - 1.0)
    worst = int(np.argmax(np.max(np.abs(res.sunlit_column_cm2 / np.where(ref > 0, ref, 1.0) - 1.0) * mask, axis=0)))
    sub = np.unique(np.append(np.linspace(0, len(looks) - 1, args.tight_subset).astype(int), worst))
    tight = np.array([reference_sunlit(observer, looks[sub], p, 1e-10, node_breaks=True) for p in profiles])
    m2 = tight > 0
    err_fast = np.max(np.abs(res.sunlit_column_cm2[:, sub][m2] / tight[m2] - 1.0))
    err_ref = np.max(np.abs(ref[:, sub][m2] / tight[m2] - 1.0))
    same = np.max(np.abs(res_ext.sunlit_column_cm2 - res.sunlit_column_cm2) / np.maximum(res.sunlit_column_cm2, 1e-300))

    lines = [
        "dustrt line-of-sight benchmark (demo geometry and densities; see script docstring)",
        f"rays: {len(looks)}, populations: {len(profiles)}, relative_tolerance: {tol:g}",
        f"rays crossing the shadow: {int(np.sum(res.column_cm2[0] > res.sunlit_column_cm2[0] * (1 + 1e-12)))}",
        f"integrate_columns, extinction off: {t_fast * 1e3:.1f} ms",
        f"integrate_columns, extinction on:  {t_ext * 1e3:.1f} ms ({t_ext / t_fast:.0f}x extinction off)",
        "extinction weights, largest relative difference vs relative_tolerance=1e-8: "
        + ", ".join(f"{part} {err:.1e}" for part, err in ext_err.items()),
        f"scipy quad reference (sunlit columns only): {t_ref * 1e3:.0f} ms",
        f"speed ratio (reference / extinction off): {t_ref / t_fast:.0f}x",
        f"largest relative difference of sunlit columns vs reference: {np.max(rel):.2e}",
        f"largest relative error vs tight reference (epsrel 1e-10, {len(sub)} rays incl. the worst above): "
        f"integrate_columns {err_fast:.2e}, quad(epsrel={tol:g}) {err_ref:.2e}",
        f"sunlit columns identical with extinction on/off: max rel diff {same:.1e}",
        f"all rays converged: {bool(np.all(res_ext.converged))}",
    ]
    text = "\n".join(lines)
    print(text)
    (Path(__file__).with_name("bench_columns_report.txt")).write_text(text + "\n", encoding="utf-8")
    write_bench_json(
        "bench_columns", t_ref / t_fast, "scipy quad per ray / integrate_columns (extinction off)",
        {"dustrt_extinction_off": t_fast, "dustrt_extinction_on": t_ext, "reference": t_ref},
        {"sunlit_columns_vs_reference": np.max(rel), "dustrt_vs_tight_reference": err_fast,
         "reference_vs_tight_reference": err_ref, **{f"extinction_{k.replace(' ', '_')}": v for k, v in ext_err.items()}},
        {"case": f"{len(looks)} rays, {len(profiles)} populations, relative_tolerance {tol:g}"})


if __name__ == "__main__":
    main()
