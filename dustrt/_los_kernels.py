"""Numba kernels for the line-of-sight integrator (private; see dustrt.los for the API).

Kernels take the plain arrays of :class:`dustrt.density.PackedProfiles`, loop over
all rays inside, and fill output arrays passed in. Lengths inside the kernels are
in km and densities in cm^-3; the caller converts columns to cm^-2.

Quadrature: globally adaptive Gauss-Kronrod 7-15 on panels delimited by break
points (ray start/end, tangent point, shadow-cylinder crossings, table-node and
terminator-peak crossings), bisecting the panel with the largest error relative
to its population's target until every population meets it. Panels live in
work arrays (an explicit list instead of recursion).

References
----------
[1] Piessens, R., de Doncker-Kapenga, E., Ueberhuber, C. W., Kahaner, D. K. (1983),
    QUADPACK: A Subroutine Package for Automatic Integration, Springer; routine QK15
    (Gauss-Kronrod 7-15 nodes and weights).
[2] Kronrod, A. S. (1965), Nodes and Weights of Quadrature Formulas, Consultants Bureau,
    New York (the 3-7 pair).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from .density import KIND_EXPONENTIAL, KIND_POWER_LAW, KIND_TABLE, KIND_TERMINATOR

_K_EXP = KIND_EXPONENTIAL
_K_POW = KIND_POWER_LAW
_K_TERM = KIND_TERMINATOR
_K_TAB = KIND_TABLE

# [1] QK15: Kronrod abscissae (positive half, descending) and weights; Gauss 7-point weights.
_XK_HALF = (
    0.991455371120812639206854697526329,
    0.949107912342758524526189684047851,
    0.864864423359769072789712788640926,
    0.741531185599394439863864773280788,
    0.586087235467691130294144845693013,
    0.405845151377397166906606412076961,
    0.207784955007898467600689403773245,
    0.0,
)
_WK_HALF = (
    0.022935322010529224963732008058970,
    0.063092092629978553290700663189204,
    0.104790010322250183839876322541518,
    0.140653259715525918745189590510238,
    0.169004726639267902826583426598550,
    0.190350578064785409913256402421014,
    0.204432940075298892414161999234649,
    0.209482141084727828012999174891714,
)
# Gauss 7-point weights belong to Kronrod abscissae 1, 3, 5 and 7 of the list above.
_WG_HALF = (0.0, 0.129484966168869693270611432679082, 0.0, 0.279705391489276667901467771423780,
            0.0, 0.381830050505118944950369775488975, 0.0, 0.417959183673469387755102040816327)


def _full_rule():
    x = np.array([-v for v in _XK_HALF[:-1]] + list(_XK_HALF[::-1]))
    wk = np.array(list(_WK_HALF[:-1]) + list(_WK_HALF[::-1]))
    wg = np.array(list(_WG_HALF[:-1]) + list(_WG_HALF[::-1]))
    return x, wk, wg


GK_X, GK_WK, GK_WG = _full_rule()

# [2] Gauss 3 / Kronrod 7 pair for the sunward columns N^sun (cheaper per panel; those
# columns only enter the small extinction correction). Exactness is checked in the tests.
_X7 = (0.960491268708020283423507092629080, 0.774596669241483377035853079956480,
       0.434243749346802558002071502844628, 0.0)
_W7K = (0.104656226026467265193823857192073, 0.268488089868333440728569280666710,
        0.401397414775962222905051818618432, 0.450916538658474142345110087045571)
_W7G = (0.0, 0.555555555555555555555555555555556, 0.0, 0.888888888888888888888888888888889)
GK7_X = np.array([-v for v in _X7[:-1]] + list(_X7[::-1]))
GK7_WK = np.array(list(_W7K[:-1]) + list(_W7K[::-1]))
GK7_WG = np.array(list(_W7G[:-1]) + list(_W7G[::-1]))
#: Indices of the 7 Gauss nodes within the 15 Kronrod nodes.
G7_INDEX = np.nonzero(GK_WG)[0].astype(np.int64)
G7_X = GK_X[G7_INDEX].copy()
G7_W = GK_WG[G7_INDEX].copy()

# Helpers that allocate nothing are compiled without the numba runtime: with it, every
# call to a non-inlined helper reference-counts each array argument, which made the
# per-node density evaluation ~10x slower (measured: 60 ns vs 6 ns per point).
try:
    _leaf = njit(cache=True, _nrt=False)
except (KeyError, TypeError):  # option not offered by this numba version
    _leaf = njit(cache=True)

#: Relative tolerance never asked of the quadrature (round-off floor).
_TOL_FLOOR = 1e-14


@_leaf
def _density_hd(h, d, k, kinds, params, tidx, talt, tdist, tval):
    """Density [cm^-3] of profile k at altitude h [km] and terminator distance d [km]."""
    kind = kinds[k]
    if kind == _K_EXP:
        return params[k, 0] * math.exp(-h / params[k, 1])
    if kind == _K_POW:
        base = 1.0 + h / params[k, 1]
        if base < 1e-300:
            base = 1e-300
        return params[k, 0] * base ** (-params[k, 2])
    if kind == _K_TERM:
        x = d - params[k, 4]
        w = params[k, 2] if x >= 0.0 else params[k, 3]
        f = params[k, 5]
        return params[k, 0] * math.exp(-h / params[k, 1]) * (f + (1.0 - f) * math.exp(-0.5 * (x / w) ** 2))
    # table
    ao = tidx[k, 0]
    na = tidx[k, 1]
    do = tidx[k, 2]
    nd = tidx[k, 3]
    vo = tidx[k, 4]
    if h < talt[ao] or h > talt[ao + na - 1]:
        return 0.0
    # bracketing cell in altitude (binary search)
    lo = 0
    hi = na - 1
    while hi - lo > 1:
        mid = (lo + hi) >> 1
        if talt[ao + mid] <= h:
            lo = mid
        else:
            hi = mid
    th = (h - talt[ao + lo]) / (talt[ao + lo + 1] - talt[ao + lo])
    dc = d
    if dc < tdist[do]:
        dc = tdist[do]
    elif dc > tdist[do + nd - 1]:
        dc = tdist[do + nd - 1]
    jlo = 0
    jhi = nd - 1
    while jhi - jlo > 1:
        mid = (jlo + jhi) >> 1
        if tdist[do + mid] <= dc:
            jlo = mid
        else:
            jhi = mid
    td = (dc - tdist[do + jlo]) / (tdist[do + jlo + 1] - tdist[do + jlo])
    base = vo + lo * nd + jlo
    v = ((1.0 - th) * (1.0 - td) * tval[base] + th * (1.0 - td) * tval[base + nd]
         + (1.0 - th) * td * tval[base + 1] + th * td * tval[base + nd + 1])
    return params[k, 0] * v


@njit(cache=True)
def density_grid_kernel(altitude_km, distance_km, kinds, params, tidx, talt, tdist, tval, out):
    """Fill out[P, n] with every profile's density at (altitude_km[i], distance_km[i])."""
    for k in range(kinds.shape[0]):
        for i in range(altitude_km.shape[0]):
            out[k, i] = _density_hd(altitude_km[i], distance_km[i], k, kinds, params, tidx, talt, tdist, tval)


@_leaf
def _densities_at(x, y, z, radius, kinds, params, tidx, talt, tdist, tval, out):
    """Fill out[P] with densities [cm^-3] at the point (x, y, z) [km]."""
    r = math.sqrt(x * x + y * y + z * z)
    h = r - radius
    sx = x / r if r > 0.0 else 0.0
    if sx > 1.0:
        sx = 1.0
    elif sx < -1.0:
        sx = -1.0
    d = radius * math.asin(sx)
    for k in range(kinds.shape[0]):
        out[k] = _density_hd(h, d, k, kinds, params, tidx, talt, tdist, tval)


@_leaf
def _push(bp, nbp, s, a, b):
    """Append break point s if strictly inside (a, b)."""
    if s > a and s < b and nbp < bp.shape[0]:
        bp[nbp] = s
        return nbp + 1
    return nbp


@_leaf
def _sphere_roots(o, v, rr, a, b, bp, nbp):
    """Break points where the ray o + s v (|v| = 1) crosses the sphere of radius rr."""
    bq = o[0] * v[0] + o[1] * v[1] + o[2] * v[2]
    c = o[0] * o[0] + o[1] * o[1] + o[2] * o[2] - rr * rr
    disc = bq * bq - c
    if disc <= 0.0:
        return nbp
    root = math.sqrt(disc)
    nbp = _push(bp, nbp, -bq - root, a, b)
    return _push(bp, nbp, -bq + root, a, b)


@_leaf
def _cone_roots(o, v, dkm, radius, a, b, bp, nbp):
    """Break points where the ray crosses terminator distance dkm: p_x = |p| sin(d/R)."""
    ang = dkm / radius
    if ang <= -0.5 * math.pi or ang >= 0.5 * math.pi:
        return nbp
    sig = math.sin(ang)
    s2 = sig * sig
    bq = o[0] * v[0] + o[1] * v[1] + o[2] * v[2]
    o2 = o[0] * o[0] + o[1] * o[1] + o[2] * o[2]
    qa = v[0] * v[0] - s2
    qb = o[0] * v[0] - s2 * bq
    qc = o[0] * o[0] - s2 * o2
    if abs(qa) < 1e-14:
        if qb == 0.0:
            return nbp
        roots = (-qc / (2.0 * qb), math.inf)
    else:
        disc = qb * qb - qa * qc
        if disc < 0.0:
            return nbp
        root = math.sqrt(disc)
        roots = ((-qb - root) / qa, (-qb + root) / qa)
    for s in roots:
        # squaring admitted the mirror cone p_x = -|p| sin(d/R); keep matching signs
        if math.isfinite(s) and (o[0] + s * v[0]) * sig >= 0.0:
            nbp = _push(bp, nbp, s, a, b)
    return nbp


@_leaf
def _profile_breaks(o, v, a, b, radius, kinds, params, tidx, talt, tdist, bp, nbp):
    """Break points where the density or its derivatives are not smooth along the ray."""
    for k in range(kinds.shape[0]):
        if kinds[k] == _K_TAB:
            ao, na, do, nd = tidx[k, 0], tidx[k, 1], tidx[k, 2], tidx[k, 3]
            for i in range(na):
                rr = radius + talt[ao + i]
                if rr > 0.0:
                    nbp = _sphere_roots(o, v, rr, a, b, bp, nbp)
            for j in range(nd):
                nbp = _cone_roots(o, v, tdist[do + j], radius, a, b, bp, nbp)
        elif kinds[k] == _K_TERM:
            nbp = _cone_roots(o, v, params[k, 4], radius, a, b, bp, nbp)
    return nbp


@_leaf
def _gk(o, v, a, b, radius, kinds, params, tidx, talt, tdist, tval, dens, val, err, row, rx, rwk, rwg):
    """Embedded Gauss-Kronrod pair (rx, rwk, rwg) on [a, b] for all populations.

    Fills val[row, :] with the Kronrod estimate and err[row, :] with |Kronrod - Gauss| [km cm^-3].
    """
    npop = kinds.shape[0]
    half = 0.5 * (b - a)
    mid = 0.5 * (a + b)
    for p in range(npop):
        val[row, p] = 0.0
        err[row, p] = 0.0  # holds the Gauss sum until the end
    for j in range(rx.shape[0]):
        s = mid + half * rx[j]
        _densities_at(o[0] + s * v[0], o[1] + s * v[1], o[2] + s * v[2], radius,
                      kinds, params, tidx, talt, tdist, tval, dens)
        for p in range(npop):
            val[row, p] += rwk[j] * dens[p]
            err[row, p] += rwg[j] * dens[p]
    for p in range(npop):
        kr = half * val[row, p]
        ga = half * err[row, p]
        val[row, p] = kr
        err[row, p] = abs(kr - ga)


@_leaf
def _adaptive(o, v, bp, nbp, dark_lo, dark_hi, radius, kinds, params, tidx, talt, tdist, tval,
              tol, floor_frac, pa, pb, pval, perr, plit, tot, totlit, dens, acc, rx, rwk, rwg):
    """Adaptive Gauss-Kronrod (rule rx, rwk, rwg) over the sorted break points bp[:nbp] (first = start, last = end).

    Panels with midpoint in (dark_lo, dark_hi) are dark. Fills tot[P] (all panels) and
    totlit[P] (sunlit panels) [km cm^-3]; returns (number of panels, converged).
    Targets: total error <= tol * tot and sunlit error <= tol * max(totlit, floor_frac * tot).
    acc is float64[4, P] scratch space.
    """
    npop = kinds.shape[0]
    maxpan = pa.shape[0]
    npan = 0
    length = bp[nbp - 1] - bp[0]
    gap = 1e-9 + 1e-13 * length
    end = bp[nbp - 1]
    last = bp[0]
    for i in range(1, nbp - 1):
        # merge break points closer than `gap` (and any too close to the end)
        if bp[i] - last > gap and end - bp[i] > gap and npan < maxpan - 4:
            pa[npan] = last
            pb[npan] = bp[i]
            npan += 1
            last = bp[i]
    if end > last:
        pa[npan] = last
        pb[npan] = end
        npan += 1
    if npan == 0:
        for p in range(npop):
            tot[p] = 0.0
            totlit[p] = 0.0
        return 0, True
    # at least four panels so a narrow feature is less likely to slip between nodes
    while npan < 4:
        w = -1.0
        iw = 0
        for i in range(npan):
            if pb[i] - pa[i] > w:
                w = pb[i] - pa[i]
                iw = i
        m = 0.5 * (pa[iw] + pb[iw])
        pa[npan] = m
        pb[npan] = pb[iw]
        pb[iw] = m
        npan += 1
    for i in range(npan):
        _gk(o, v, pa[i], pb[i], radius, kinds, params, tidx, talt, tdist, tval, dens, pval, perr, i, rx, rwk, rwg)
        m = 0.5 * (pa[i] + pb[i])
        plit[i] = not (m > dark_lo and m < dark_hi)
    tol_eff = max(tol, _TOL_FLOOR)
    errsum = acc[0]
    errlit = acc[1]
    target = acc[2]
    targetlit = acc[3]
    converged = False
    while True:
        for p in range(npop):
            tot[p] = 0.0
            totlit[p] = 0.0
            errsum[p] = 0.0
            errlit[p] = 0.0
        for i in range(npan):
            for p in range(npop):
                tot[p] += pval[i, p]
                errsum[p] += perr[i, p]
                if plit[i]:
                    totlit[p] += pval[i, p]
                    errlit[p] += perr[i, p]
        done = True
        for p in range(npop):
            target[p] = tol_eff * abs(tot[p])
            targetlit[p] = tol_eff * max(abs(totlit[p]), floor_frac * abs(tot[p]))
            if errsum[p] > target[p] or errlit[p] > targetlit[p]:
                done = False
        if done:
            converged = True
            break
        if npan >= maxpan:
            break
        # bisect the panel with the largest error relative to a failing target
        worst = -1.0
        iw = -1
        for i in range(npan):
            score = 0.0
            for p in range(npop):
                if errsum[p] > target[p]:
                    sc = perr[i, p] / max(target[p], 1e-300)
                    if sc > score:
                        score = sc
                if plit[i] and errlit[p] > targetlit[p]:
                    sc = perr[i, p] / max(targetlit[p], 1e-300)
                    if sc > score:
                        score = sc
            if score > worst:
                worst = score
                iw = i
        m = 0.5 * (pa[iw] + pb[iw])
        if not (m > pa[iw] and m < pb[iw]):
            break  # panel at round-off width: cannot refine further
        pa[npan] = m
        pb[npan] = pb[iw]
        plit[npan] = plit[iw]
        pb[iw] = m
        _gk(o, v, pa[iw], pb[iw], radius, kinds, params, tidx, talt, tdist, tval, dens, pval, perr, iw,
            rx, rwk, rwg)
        _gk(o, v, pa[npan], pb[npan], radius, kinds, params, tidx, talt, tdist, tval, dens, pval, perr, npan,
            rx, rwk, rwg)
        npan += 1
    return npan, converged


@_leaf
def _sort_prefix(bp, nbp):
    """Insertion sort of bp[:nbp] (short arrays)."""
    for i in range(1, nbp):
        x = bp[i]
        j = i - 1
        while j >= 0 and bp[j] > x:
            bp[j + 1] = bp[j]
            j -= 1
        bp[j + 1] = x


@_leaf
def _sun_columns(px, py, pz, radius, r_top, kinds, params, tidx, talt, tdist, tval, tol,
                 bp, pa, pb, pval, perr, plit, out, outlit, dens, acc, o, v):
    """Column [km cm^-3] of every population from (px, py, pz) toward the Sun (+x) to the model top."""
    rho2 = py * py + pz * pz
    rem = r_top * r_top - rho2
    npop = kinds.shape[0]
    if rem <= 0.0:
        for p in range(npop):
            out[p] = 0.0
        return True
    t_end = -px + math.sqrt(rem)
    if t_end <= 0.0:
        for p in range(npop):
            out[p] = 0.0
        return True
    o[0] = px
    o[1] = py
    o[2] = pz
    v[0] = 1.0
    v[1] = 0.0
    v[2] = 0.0
    nbp = 0
    bp[nbp] = 0.0
    nbp += 1
    nbp = _push(bp, nbp, -px, 0.0, t_end)
    nbp = _profile_breaks(o, v, 0.0, t_end, radius, kinds, params, tidx, talt, tdist, bp, nbp)
    if nbp < bp.shape[0]:
        bp[nbp] = t_end
        nbp += 1
    _sort_prefix(bp, nbp)
    npan, conv = _adaptive(o, v, bp, nbp, math.inf, math.inf, radius, kinds, params, tidx, talt, tdist, tval,
                           tol, 0.0, pa, pb, pval, perr, plit, out, outlit, dens, acc, GK7_X, GK7_WK, GK7_WG)
    return conv


@njit(cache=True)
def integrate_rays_kernel(observers, looks, radius, top_altitude, kinds, params, tidx, talt, tdist, tval,
                          tol, tol_inner, floor_frac, do_extinction, max_panels, max_breaks,
                          column, sunlit, k_sun, k_obs, path_length, hits, tan_alt, tan_dist, converged):
    """Columns, sunlit columns and first-order extinction weights for many rays.

    Parameters
    ----------
    observers, looks : float64[L, 3]
        Observer positions [km] (at or above the surface) and unit look directions.
    radius, top_altitude : float
        Body radius and model top altitude [km].
    kinds, params, tidx, talt, tdist, tval :
        Fields of dustrt.density.PackedProfiles.
    tol, tol_inner : float
        Relative tolerance of the ray columns and of the sunward columns N^sun.
    floor_frac : float
        Sunlit columns below floor_frac * total column are converged to tol * floor_frac * total.
    do_extinction : bool
        Compute k_sun and k_obs.
    max_panels, max_breaks : int
        Work-array sizes.

    Outputs (filled)
    ----------------
    column, sunlit : [P, L] in km cm^-3 (caller multiplies by 1e5 for cm^-2).
    k_sun, k_obs : [P, P, L] in km^2 cm^-6 (caller multiplies by 1e10 for cm^-4):
        int n_p V N_q^sun ds and int n_p V N_q^obs ds.
    path_length [L] km, hits [L] bool, tan_alt [L] km, tan_dist [L] km, converged [L] bool.
    """
    nray = observers.shape[0]
    npop = kinds.shape[0]
    r_top = radius + top_altitude
    bp = np.empty(max_breaks)
    pa = np.empty(max_panels)
    pb = np.empty(max_panels)
    pval = np.empty((max_panels, npop))
    perr = np.empty((max_panels, npop))
    plit = np.empty(max_panels, dtype=np.bool_)
    bp2 = np.empty(max_breaks)
    pa2 = np.empty(max_panels)
    pb2 = np.empty(max_panels)
    pval2 = np.empty((max_panels, npop))
    perr2 = np.empty((max_panels, npop))
    plit2 = np.empty(max_panels, dtype=np.bool_)
    tot = np.empty(npop)
    totlit = np.empty(npop)
    dens = np.empty(npop)
    dens_q = np.empty(npop)
    nsun = np.empty(npop)
    nsunlit = np.empty(npop)
    nobs = np.empty(npop)
    cum = np.empty(npop)
    acc = np.empty((4, npop))
    o = np.empty(3)
    v = np.empty(3)
    o2 = np.empty(3)
    v2 = np.empty(3)
    for l in range(nray):
        for c in range(3):
            o[c] = observers[l, c]
            v[c] = looks[l, c]
        for p in range(npop):
            column[p, l] = 0.0
            sunlit[p, l] = 0.0
            for q in range(npop):
                k_sun[p, q, l] = 0.0
                k_obs[p, q, l] = 0.0
        hits[l] = False
        converged[l] = True
        path_length[l] = 0.0
        bq = o[0] * v[0] + o[1] * v[1] + o[2] * v[2]
        ro2 = o[0] * o[0] + o[1] * o[1] + o[2] * o[2]
        disc = bq * bq - (ro2 - r_top * r_top)
        inside = ro2 <= r_top * r_top
        misses = (not inside) and (disc <= 0.0 or -bq + math.sqrt(max(disc, 0.0)) <= 0.0)
        if misses:
            s0 = 0.0
            s1 = 0.0
        else:
            root = math.sqrt(max(disc, 0.0))
            s0 = 0.0 if inside else -bq - root
            s1 = -bq + root
            disc_s = bq * bq - (ro2 - radius * radius)
            if disc_s > 0.0 and bq < 0.0:
                s_hit = -bq - math.sqrt(disc_s)
                if s_hit >= s0 and s_hit < s1:
                    s1 = s_hit
                    hits[l] = True
        # closest approach within the traversed segment (whole ray s >= 0 if nothing is traversed)
        st = -bq
        if misses:
            st = max(st, 0.0)
        else:
            st = min(max(st, s0), s1)
        tx = o[0] + st * v[0]
        ty = o[1] + st * v[1]
        tz = o[2] + st * v[2]
        tr = math.sqrt(tx * tx + ty * ty + tz * tz)
        tan_alt[l] = 0.0 if hits[l] else tr - radius
        tan_dist[l] = radius * math.asin(min(1.0, max(-1.0, tx / tr)))
        if misses or s1 <= s0:
            continue
        path_length[l] = s1 - s0
        # dark interval: x < 0 and y^2 + z^2 < R^2 (convex, so one interval)
        dlo = -math.inf
        dhi = math.inf
        qa = v[1] * v[1] + v[2] * v[2]
        qb = o[1] * v[1] + o[2] * v[2]
        qc = o[1] * o[1] + o[2] * o[2] - radius * radius
        if qa <= 1e-300:
            if qc >= 0.0:
                dlo = math.inf
        else:
            dq = qb * qb - qa * qc
            if dq <= 0.0:
                dlo = math.inf
            else:
                rq = math.sqrt(dq)
                dlo = (-qb - rq) / qa
                dhi = (-qb + rq) / qa
        if v[0] < 0.0:
            dlo = max(dlo, -o[0] / v[0])
        elif v[0] > 0.0:
            dhi = min(dhi, -o[0] / v[0])
        elif o[0] >= 0.0:
            dlo = math.inf
        if not (dhi > dlo):
            dlo = math.inf
            dhi = math.inf
        nbp = 0
        bp[nbp] = s0
        nbp += 1
        nbp = _push(bp, nbp, -bq, s0, s1)
        if math.isfinite(dlo):
            nbp = _push(bp, nbp, dlo, s0, s1)
        if math.isfinite(dhi):
            nbp = _push(bp, nbp, dhi, s0, s1)
        nbp = _profile_breaks(o, v, s0, s1, radius, kinds, params, tidx, talt, tdist, bp, nbp)
        bp[nbp] = s1
        nbp += 1
        _sort_prefix(bp, nbp)
        npan, conv = _adaptive(o, v, bp, nbp, dlo, dhi, radius, kinds, params, tidx, talt, tdist, tval,
                               tol, floor_frac, pa, pb, pval, perr, plit, tot, totlit, dens, acc,
                               GK_X, GK_WK, GK_WG)
        if not conv:
            converged[l] = False
        for p in range(npop):
            column[p, l] = tot[p]
            sunlit[p, l] = totlit[p]
        if not do_extinction:
            continue
        # Extinction weights on the converged panels, in ray order; the 7 Gauss nodes of
        # each converged panel integrate n_p times the smooth columns N_q to about tol.
        order = np.argsort(pa[:npan])
        for p in range(npop):
            cum[p] = 0.0
        for ii in range(npan):
            i = order[ii]
            a = pa[i]
            b = pb[i]
            if plit[i]:
                half = 0.5 * (b - a)
                mid = 0.5 * (a + b)
                for j in range(G7_X.shape[0]):
                    s = mid + half * G7_X[j]
                    px = o[0] + s * v[0]
                    py = o[1] + s * v[1]
                    pz = o[2] + s * v[2]
                    _densities_at(px, py, pz, radius, kinds, params, tidx, talt, tdist, tval, dens)
                    # N^obs(s) = column up to the panel start + 7-point Gauss on [a, s]
                    hs = 0.5 * (s - a)
                    for q in range(npop):
                        nobs[q] = 0.0
                    for g in range(G7_X.shape[0]):
                        t = a + hs * (1.0 + G7_X[g])
                        _densities_at(o[0] + t * v[0], o[1] + t * v[1], o[2] + t * v[2], radius,
                                      kinds, params, tidx, talt, tdist, tval, dens_q)
                        for q in range(npop):
                            nobs[q] += G7_W[g] * dens_q[q]
                    for q in range(npop):
                        nobs[q] = cum[q] + hs * nobs[q]
                    conv2 = _sun_columns(px, py, pz, radius, r_top, kinds, params, tidx, talt, tdist, tval,
                                         tol_inner, bp2, pa2, pb2, pval2, perr2, plit2, nsun, nsunlit, dens_q,
                                         acc, o2, v2)
                    if not conv2:
                        converged[l] = False
                    w = half * G7_W[j]
                    for p in range(npop):
                        for q in range(npop):
                            k_sun[p, q, l] += w * dens[p] * nsun[q]
                            k_obs[p, q, l] += w * dens[p] * nobs[q]
            for q in range(npop):
                cum[q] += pval[i, q]
