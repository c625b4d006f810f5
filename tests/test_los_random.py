"""Sunlit and total columns for random observers and views vs brute-force scipy quadrature.

Independent reference: scipy.integrate.quad (epsrel 1e-10) along the ray, split at the tangent
point and the analytic shadow-cylinder crossings, with the DESIGN.md shadow test applied
point by point.
"""

import numpy as np
from scipy import integrate

from dustrt import geometry as geo
from dustrt.density import ExponentialProfile, PowerLawProfile, TerminatorProfile
from dustrt.los import integrate_columns

R = 1737.4
TOP = 150.0
PROFILES = [ExponentialProfile(1e-2, 8.0), TerminatorProfile(1e-3, 12.0, 150.0, 40.0, 20.0, 0.1),
            PowerLawProfile(1e-3, 5.0, 2.5)]


def _reference(obs, look, prof, s0, s1, sunlit):
    def f(s):
        pt = obs + s * look
        r = np.linalg.norm(pt)
        if sunlit and pt[0] < 0 and pt[1] ** 2 + pt[2] ** 2 < R * R:
            return 0.0
        return float(prof.density_cm3(r - R, R * np.arcsin(np.clip(pt[0] / r, -1, 1))))

    d0, d1 = geo.shadow_cylinder_crossings_km(obs, look[None, :], R)
    brk = [x for x in (-float(obs @ look), float(d0[0]), float(d1[0])) if np.isfinite(x) and s0 < x < s1]
    edges = np.unique(np.concatenate([[s0, s1], brk]))
    return 1e5 * sum(integrate.quad(f, a, b, epsrel=1e-10, limit=500)[0] for a, b in zip(edges[:-1], edges[1:]))


def _check_ray(obs, look, s0, s1):
    """Columns of one ray against the quad reference; returns how many populations are partly lit."""
    c = integrate_columns(obs, look, R, TOP, PROFILES, 1e-6, extinction=False)
    partial = 0
    for p, prof in enumerate(PROFILES):
        total = _reference(obs, look[0], prof, s0, s1, False)
        lit = _reference(obs, look[0], prof, s0, s1, True)
        assert abs(c.column_cm2[p, 0] / total - 1) < 1e-5
        assert abs(c.sunlit_column_cm2[p, 0] - lit) < 1e-5 * max(lit, 1e-6 * total)
        partial += int(0.001 * total < lit < 0.999 * total)
    return partial


def test_random_geometries_against_quad():
    rng = np.random.default_rng(5)
    done = 0
    while done < 8:
        h_o = rng.uniform(10, 250)
        obs = geo.observer_position_km(R, h_o, rng.uniform(-60, 60), rng.uniform(0, 24))
        try:
            look = geo.limb_look_directions(obs, R, [rng.uniform(-20, min(h_o - 1, 120))], rng.uniform(-180, 180))
        except ValueError:  # subsolar/antisolar observer: no sunward horizontal
            continue
        s0, s1, _ = geo.ray_segment_km(obs, look, R, TOP)
        if not s1[0] > s0[0]:
            continue
        _check_ray(obs, look, float(s0[0]), float(s1[0]))
        done += 1


def test_random_views_across_the_shadow_boundary():
    # observers near the terminators looking along the Sun line: many rays cross the shadow
    # cylinder, so the sunlit column is a part of the total
    rng = np.random.default_rng(11)
    partial = 0
    for _ in range(20):
        h_o = rng.uniform(20, 120)
        t = rng.choice([rng.uniform(5.0, 6.9), rng.uniform(17.1, 19.0)])
        obs = geo.observer_position_km(R, h_o, rng.uniform(-30, 30), t)
        look = geo.limb_look_directions(obs, R, [rng.uniform(0, h_o - 5)], rng.choice([0.0, 180.0]) + rng.normal(0, 20))
        s0, s1, _ = geo.ray_segment_km(obs, look, R, TOP)
        partial += _check_ray(obs, look, float(s0[0]), float(s1[0]))
    assert partial > 0  # the draw (fixed seed) includes partly shadowed rays (4 of 60 here)
