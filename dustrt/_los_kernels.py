"""Numba kernels for the line-of-sight integrator (private; see dustrt.los for the API).

Kernels take the plain arrays of :class:`dustrt.density.PackedProfiles`, loop over
all rays inside, and fill output arrays passed in. Lengths inside the kernels are
in km and densities in cm^-3; the caller converts columns to cm^-2.

Quadrature: globally adaptive Gauss-Kronrod 7-15 on panels delimited by break
points (ray start/end, tangent point, shadow-cylinder crossings, table-node and
terminator-peak crossings), bisecting the panel with the largest error relative
to its population's target until every population meets it. Panels live in
work arrays (an explicit list instead of recursion).

Extinction weights (first order in the optical depth):

- Sunward columns N_q^sun(p), the column of q from p along +x to the model top: tables
  cell by cell between the sunward ray's node crossings (bilinear there, 2-point Gauss on
  sub-cells short against the distance from the body's centre); the other profiles by
  adaptive Gauss-Kronrod 7-15 on their own, few, break points.
- N^sun along a sunlit segment is sampled on pieces and interpolated (in log N where that
  fits better: near-quadratic in s for layered densities): 5 samples a, (a+c)/2, c,
  (c+b)/2, b per piece [a, b] split at c. The error of the quadratic through samples 0, 2, 4,
  seen at samples 1 and 3 and weighted by each population's column over the piece, decides
  which piece to bisect (at c, reusing every sample) until it is small against K_pq for every
  pair. Pieces start at the tangent point and at the points whose sunward ray grazes a table
  node sphere (N^sun is not smooth there, and along limb rays those points come evenly
  spaced: equally spaced samples could alias them).
- K_pq then follows from the 15-point Kronrod rule on each sunlit column panel cut at the
  piece ends, with N_q^obs from the exact integral of the part's 15-node interpolant of n_q
  (an integration matrix: no further density evaluations).

About 50 sunward columns per ray instead of one per quadrature node; see
validation/bench_columns.py for timings and tests/test_los.py for the accuracy checks.

References
----------
[1] Piessens, R., de Doncker-Kapenga, E., Ueberhuber, C. W., Kahaner, D. K. (1983),
    QUADPACK: A Subroutine Package for Automatic Integration, Springer; routine QK15
    (Gauss-Kronrod 7-15 nodes and weights).
[2] Abramowitz, M., Stegun, I. A. (1964), Handbook of Mathematical Functions, NBS AMS 55,
    Table 25.4 (Gauss-Legendre nodes; the 2-point rule is exact for cubics, Eq. 25.4.30).
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
#: Kind code of a population left out of an integration (its density reads as zero).
_K_SKIP = -1

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

#: [2] 2-point Gauss nodes on [-1, 1] (weights 1) for the table cells of sunward columns.
G2_X = np.array([-1.0 / math.sqrt(3.0), 1.0 / math.sqrt(3.0)])


def _integration_matrix(x):
    """S[j, g] = int_{-1}^{x_j} l_g(t) dt for the Lagrange basis l_g on the nodes x."""
    leg = np.polynomial.legendre
    coef = np.linalg.solve(leg.legvander(x, x.size - 1), np.eye(x.size))  # column g: l_g
    return np.stack([leg.legval(x, leg.legint(coef[:, g], lbnd=-1.0)) for g in range(x.size)], axis=1)


#: Cumulative integrals at the 15 Kronrod nodes of the degree-14 interpolant through them
#: (row j: up to node j; column g: weight of the value at node g).
GK_S = _integration_matrix(GK_X)

#: Samples per interpolation piece [a, b] split at c: a, (a + c)/2, c, (c + b)/2, b.
_PIECE_NODES = 5
#: Barycentric weights of 5 equally spaced nodes: (-1)^k C(4, k).
_BARY5 = np.array([1.0, -4.0, 6.0, -4.0, 1.0])
#: Most bisections of interpolation pieces per ray (each costs 4 sunward columns).
_MAX_BISECTIONS = 256
#: Error of a piece's interpolant relative to the estimate (the coarse quadratic through
#: samples 0, 2, 4 seen at samples 1, 3): the interpolant uses all 5 samples, so halving
#: the step leaves 1/8 of a smooth N^sun's error, and 1/4 across a kink in its slope (where
#: a table node passes); the larger is taken. Checked against tight runs in the tests and
#: validation/bench_columns.py.
_PIECE_ERROR_FACTOR = 0.25
#: Sunward columns are integrated this much tighter than the extinction target, so their
#: quadrature error stays below what the piece error estimates resolve.
_SUN_TOLERANCE_FRACTION = 0.1
#: Table sub-cells in sunward columns are at most this fraction of r long when the sunward
#: columns' tolerance is _SUB_CELL_TOLERANCE: the 2-point Gauss error then stays below ~2e-6
#: (measured on node-dense, coarse and thin-layer tables against Gauss-Kronrod at 1e-12) and
#: scales as the fraction^4, which sets the fraction for other tolerances.
_SUB_CELL_FRACTION = 0.05
_SUB_CELL_TOLERANCE = 1e-5

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
def _bracket(axis, off, n, x, x0, x1):
    """Index i with axis[off + i] <= x <= axis[off + i + 1], for x0 <= x <= x1 (the axis ends).

    Tries the cell of an evenly spaced axis first (and its neighbours): most tables are
    evenly spaced, and this skips the binary search's unpredictable branches
    (measured ~20 % of a two-population density evaluation); otherwise bisects.
    """
    i = min(max(int((x - x0) / (x1 - x0) * (n - 1)), 0), n - 2)
    if axis[off + i] <= x and x <= axis[off + i + 1]:
        return i
    if i > 0 and axis[off + i - 1] <= x and x <= axis[off + i]:
        return i - 1
    if i < n - 2 and axis[off + i + 1] <= x and x <= axis[off + i + 2]:
        return i + 1
    lo = 0
    hi = n - 1
    while hi - lo > 1:
        mid = (lo + hi) >> 1
        if axis[off + mid] <= x:
            lo = mid
        else:
            hi = mid
    return lo


@_leaf
def _density_hd(h, d, k, kinds, params, tidx, talt, tdist, tval):
    """Density [cm^-3] of profile k at altitude h [km] and terminator distance d [km] (0 for kind _K_SKIP)."""
    kind = kinds[k]
    if kind == _K_SKIP:
        return 0.0
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
    h0 = talt[ao]
    h1 = talt[ao + na - 1]
    if not (h >= h0 and h <= h1):
        return 0.0
    lo = _bracket(talt, ao, na, h, h0, h1)
    th = (h - talt[ao + lo]) / (talt[ao + lo + 1] - talt[ao + lo])
    d0 = tdist[do]
    d1 = tdist[do + nd - 1]
    dc = min(max(d, d0), d1)
    jlo = _bracket(tdist, do, nd, dc, d0, d1)
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
def _argsort(keys, n, idx):
    """Fill idx[:n] with the order of keys[:n] (Shell sort with Ciura's gaps; no allocation).

    Replaces np.argsort, whose quicksort costs ~1 s of compile time per call site.
    """
    for i in range(n):
        idx[i] = i
    for gap in (701, 301, 132, 57, 23, 10, 4, 1):
        for i in range(gap, n):
            t = idx[i]
            j = i
            while j >= gap and keys[idx[j - gap]] > keys[t]:
                idx[j] = idx[j - gap]
                j -= gap
            idx[j] = t


@_leaf
def _table_sun_column(k, px, py, pz, radius, t_end, params, tidx, talt, tdist, tval, sub, bp, o, v):
    """Column [km cm^-3] of table population k from (px, py, pz) along +x over [0, t_end].

    Between the ray's crossings of the table's node spheres and cones the density is one
    bilinear polynomial in (h, d), and h(u), d(u) along the ray vary on the scale of the
    distance r from the body's centre (m-th derivatives ~ r^(1-m)). Each such cell is cut
    into sub-cells no longer than sub * r (r its smallest on the cell) and integrated with
    the 2-point Gauss rule, exact for cubics, so the relative error scales as sub^4: no error
    estimate and no table search per node are needed. Cells outside the table's altitude
    range are empty.
    """
    ao = tidx[k, 0]
    na = tidx[k, 1]
    do = tidx[k, 2]
    nd = tidx[k, 3]
    vo = tidx[k, 4]
    rho2 = py * py + pz * pz
    nbp = 0
    bp[nbp] = 0.0
    nbp += 1
    nbp = _push(bp, nbp, -px, 0.0, t_end)
    for i in range(na):
        disc = (radius + talt[ao + i]) ** 2 - rho2
        if disc > 0.0:
            root = math.sqrt(disc)
            nbp = _push(bp, nbp, -px - root, 0.0, t_end)
            nbp = _push(bp, nbp, -px + root, 0.0, t_end)
    o[0] = px
    o[1] = py
    o[2] = pz
    v[0] = 1.0
    v[1] = 0.0
    v[2] = 0.0
    for j in range(nd):
        nbp = _cone_roots(o, v, tdist[do + j], radius, 0.0, t_end, bp, nbp)
    if nbp < bp.shape[0]:
        bp[nbp] = t_end
        nbp += 1
    _sort_prefix(bp, nbp)
    h0 = talt[ao]
    h1 = talt[ao + na - 1]
    d0 = tdist[do]
    d1 = tdist[do + nd - 1]
    total = 0.0
    for c in range(nbp - 1):
        u0 = bp[c]
        u1 = bp[c + 1]
        if not u1 > u0:
            continue
        x = px + 0.5 * (u0 + u1)
        r = math.sqrt(x * x + rho2)
        h = r - radius
        if not (h >= h0 and h <= h1):
            continue
        lo = _bracket(talt, ao, na, h, h0, h1)
        dc = min(max(radius * math.asin(min(1.0, max(-1.0, x / r))), d0), d1)
        jlo = _bracket(tdist, do, nd, dc, d0, d1)
        ha = talt[ao + lo]
        dh = talt[ao + lo + 1] - ha
        da = tdist[do + jlo]
        dd = tdist[do + jlo + 1] - da
        base = vo + lo * nd + jlo
        v00 = tval[base]
        v10 = tval[base + nd]
        v01 = tval[base + 1]
        v11 = tval[base + nd + 1]
        xa = px + u0
        xb = px + u1
        rmin2 = rho2 if xa * xb < 0.0 else min(xa * xa, xb * xb) + rho2
        m = max(1, int(math.ceil((u1 - u0) / (sub * math.sqrt(rmin2)))))
        w = (u1 - u0) / m
        cell = 0.0
        for i in range(2 * m):
            x = px + u0 + w * (i // 2 + 0.5 + 0.5 * G2_X[i % 2])
            r = math.sqrt(x * x + rho2)
            th = (r - radius - ha) / dh
            td = (min(max(radius * math.asin(min(1.0, max(-1.0, x / r))), d0), d1) - da) / dd
            cell += (1.0 - th) * ((1.0 - td) * v00 + td * v01) + th * ((1.0 - td) * v10 + td * v11)
        total += 0.5 * w * cell
    return params[k, 0] * total


@_leaf
def _sun_columns(px, py, pz, radius, r_top, kinds, kinds_an, params, tidx, talt, tdist, tval, tol, sub,
                 bp, pa, pb, pval, perr, plit, out, outlit, dens, acc, o, v):
    """Column [km cm^-3] of every population from (px, py, pz) toward the Sun (+x) to the model top.

    Tables by _table_sun_column (sub: its sub-cell fraction); the other populations
    (kinds_an: kinds with the tables set to _K_SKIP) by adaptive Gauss-Kronrod 7-15 to the
    relative tolerance tol on their own break points. Returns whether those converged.
    """
    rho2 = py * py + pz * pz
    rem = r_top * r_top - rho2
    npop = kinds.shape[0]
    for p in range(npop):
        out[p] = 0.0
    if rem <= 0.0:
        return True
    t_end = -px + math.sqrt(rem)
    if t_end <= 0.0:
        return True
    conv = True
    analytic = False
    for p in range(npop):
        if kinds_an[p] != _K_SKIP:
            analytic = True
    if analytic:
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
        nbp = _profile_breaks(o, v, 0.0, t_end, radius, kinds_an, params, tidx, talt, tdist, bp, nbp)
        bp[nbp] = t_end
        nbp += 1
        _sort_prefix(bp, nbp)
        npan, conv = _adaptive(o, v, bp, nbp, math.inf, math.inf, radius, kinds_an, params, tidx, talt, tdist,
                               tval, tol, 0.0, pa, pb, pval, perr, plit, out, outlit, dens, acc,
                               GK_X, GK_WK, GK_WG)
    for k in range(npop):
        if kinds[k] == _K_TAB:
            out[k] = _table_sun_column(k, px, py, pz, radius, t_end, params, tidx, talt, tdist, tval, sub, bp, o, v)
    return conv


@_leaf
def _piece_sample(j, k, o, v, radius, r_top, kinds, kinds_an, params, tidx, talt, tdist, tval, tol, sub,
                  bp, pa, pb, pval, perr, plit, nsun, nsunlit, dens, acc, o2, v2, pc_x, pc_n):
    """Sunward columns at sample k of piece j = [a, b] split at c (a, (a + c)/2, c, (c + b)/2, b)."""
    s = pc_x[j, k // 2] if k % 2 == 0 else 0.5 * (pc_x[j, k // 2] + pc_x[j, k // 2 + 1])
    conv = _sun_columns(o[0] + s * v[0], o[1] + s * v[1], o[2] + s * v[2], radius, r_top, kinds, kinds_an,
                        params, tidx, talt, tdist, tval, tol, sub, bp, pa, pb, pval, perr, plit, nsun,
                        nsunlit, dens, acc, o2, v2)
    for q in range(kinds.shape[0]):
        pc_n[j, k, q] = nsun[q]
    return conv


@_leaf
def _piece_stats(j, pc_x, pc_n, pc_log, pc_islog, pc_err, pc_mean, pc_col, pa, pb, pval, plit, npan):
    """Interpolation mode, error estimate, mean N^sun and per-population column of piece j.

    pc_err[j, q]: largest |N - coarse| at samples 1 and 3, coarse being the quadratic through
    samples 0, 2, 4 in N or, where all samples are positive and that fits better, in log N
    (the piece then interpolates in log N too) [km cm^-3].
    pc_col[j, p]: column of p over the sunlit panels' overlap with the piece [km cm^-3],
    taken from the converged panels so that narrow layers between samples still count.
    """
    npop = pc_n.shape[2]
    a = pc_x[j, 0]
    c = pc_x[j, 1]
    b = pc_x[j, 2]
    # Lagrange weights of the quadratic through a, c, b at samples 1 and 3
    m = 0.5 * (a + c)
    wa1 = (m - c) * (m - b) / ((a - c) * (a - b))
    wc1 = (m - a) * (m - b) / ((c - a) * (c - b))
    wb1 = (m - a) * (m - c) / ((b - a) * (b - c))
    m = 0.5 * (c + b)
    wa3 = (m - c) * (m - b) / ((a - c) * (a - b))
    wc3 = (m - a) * (m - b) / ((c - a) * (c - b))
    wb3 = (m - a) * (m - c) / ((b - a) * (b - c))
    for q in range(npop):
        y0 = pc_n[j, 0, q]
        y2 = pc_n[j, 2, q]
        y4 = pc_n[j, 4, q]
        err = max(abs(pc_n[j, 1, q] - (wa1 * y0 + wc1 * y2 + wb1 * y4)),
                  abs(pc_n[j, 3, q] - (wa3 * y0 + wc3 * y2 + wb3 * y4)))
        pos = True
        for k in range(_PIECE_NODES):
            if not pc_n[j, k, q] > 0.0:
                pos = False
        pc_islog[j, q] = False
        if pos:
            # log N where that interpolates better (exponential-like layers), N itself
            # elsewhere (e.g. N^sun falling linearly to zero where the ray leaves the top)
            for k in range(_PIECE_NODES):
                pc_log[j, k, q] = math.log(pc_n[j, k, q])
            y0 = pc_log[j, 0, q]
            y2 = pc_log[j, 2, q]
            y4 = pc_log[j, 4, q]
            err_log = max(abs(pc_n[j, 1, q] - math.exp(wa1 * y0 + wc1 * y2 + wb1 * y4)),
                          abs(pc_n[j, 3, q] - math.exp(wa3 * y0 + wc3 * y2 + wb3 * y4)))
            if err_log < err:
                err = err_log
                pc_islog[j, q] = True
        pc_err[j, q] = err
        pc_mean[j, q] = ((c - a) * (pc_n[j, 0, q] + 4.0 * pc_n[j, 1, q] + pc_n[j, 2, q])
                         + (b - c) * (pc_n[j, 2, q] + 4.0 * pc_n[j, 3, q] + pc_n[j, 4, q])) / (6.0 * (b - a))
    for p in range(npop):
        pc_col[j, p] = 0.0
    for i in range(npan):
        if plit[i]:
            ov = min(pb[i], b) - max(pa[i], a)
            if ov > 0.0:
                f = ov / (pb[i] - pa[i])
                for p in range(npop):
                    pc_col[j, p] += f * pval[i, p]


@_leaf
def _piece_value(j, s, q, pc_x, pc_n, pc_log, pc_islog):
    """N_q^sun at s from piece j (in log N where flagged).

    The quartic through the 5 samples where the piece is split at its midpoint (smooth
    N^sun: error O(h^5)), otherwise the quadratic through the 3 samples of s's half (the
    split is then a grazing point, where N^sun is not smooth).
    """
    a = pc_x[j, 0]
    c = pc_x[j, 1]
    b = pc_x[j, 2]
    lg = pc_islog[j, q]
    if abs(c - 0.5 * (a + b)) <= 1e-9 * (b - a):
        t = min(max(4.0 * (s - a) / (b - a), 0.0), 4.0)
        num = 0.0
        den = 0.0
        for k in range(_PIECE_NODES):
            y = pc_log[j, k, q] if lg else pc_n[j, k, q]
            dt = t - k
            if dt == 0.0:
                num = y
                den = 1.0
                break
            w = _BARY5[k] / dt
            num += w * y
            den += w
        r = num / den
    else:
        k = 0 if s <= c else 2
        lo = pc_x[j, k // 2]
        t = min(max(2.0 * (s - lo) / (pc_x[j, k // 2 + 1] - lo), 0.0), 2.0)
        y0 = pc_log[j, k, q] if lg else pc_n[j, k, q]
        y1 = pc_log[j, k + 1, q] if lg else pc_n[j, k + 1, q]
        y2 = pc_log[j, k + 2, q] if lg else pc_n[j, k + 2, q]
        r = 0.5 * (t - 1.0) * (t - 2.0) * y0 - t * (t - 2.0) * y1 + 0.5 * t * (t - 1.0) * y2
    return math.exp(r) if lg else r


@_leaf
def _grazing_points(o, v, a, b, radius, kinds, tidx, talt, bp, nbp):
    """Ray parameters in (a, b) whose sunward ray grazes a table's altitude-node sphere.

    There (p_y^2 + p_z^2 = (R + h_i)^2 with p_x < 0) N^sun has a weak singularity: the
    sunward chord through the kink (or, at the table's edges, the step) of the bilinear
    density opens like (R + h_i - rho)^(3/2) (or ^(1/2)). Along limb rays these points come
    nearly evenly spaced, a pattern equally spaced samples can alias, so pieces end there.
    """
    qa = v[1] * v[1] + v[2] * v[2]
    if qa <= 1e-300:
        return nbp
    qb = o[1] * v[1] + o[2] * v[2]
    qc0 = o[1] * o[1] + o[2] * o[2]
    for k in range(kinds.shape[0]):
        if kinds[k] != _K_TAB:
            continue
        for i in range(tidx[k, 1]):
            rr = radius + talt[tidx[k, 0] + i]
            disc = qb * qb - qa * (qc0 - rr * rr)
            if rr <= 0.0 or disc <= 0.0:
                continue
            root = math.sqrt(disc)
            for s in ((-qb - root) / qa, (-qb + root) / qa):
                if o[0] + s * v[0] < 0.0:
                    nbp = _push(bp, nbp, s, a, b)
    return nbp


@_leaf
def _sun_pieces(o, v, lo0, hi0, lo1, hi1, s_tan, radius, r_top, kinds, kinds_an, params, tidx, talt, tdist, tval,
                tol, floor_frac, pa, pb, pval, plit, npan, bp2, pa2, pb2, pval2, perr2, plit2, nsun, nsunlit,
                dens, acc, o2, v2, bp3, pc_x, pc_n, pc_log, pc_islog, pc_err, pc_mean, pc_col,
                est, target, colsum, nmax):
    """Interpolation pieces of N^sun over the sunlit intervals [lo0, hi0] and [lo1, hi1] (empty if hi <= lo).

    Initial pieces run between the interval ends and the tangent point s_tan; the grazing
    points (_grazing_points) in between become, alternately, piece ends and the split
    points c of pieces [a, b], so that no piece's quadratic halves straddle one. Then the
    piece with the largest weighted error is bisected at c until, for every pair (p, q),
    _PIECE_ERROR_FACTOR * sum_j col_jp err_jq <= tol * max(K_pq, floor_frac * col_p * max N_q),
    K_pq ~ sum_j col_jp mean_jq. pc_x[j] = (a, c, b); est, target: float64[P, P] and
    colsum, nmax: float64[P] scratch. Returns (number of pieces, converged).
    """
    npop = kinds.shape[0]
    maxpc = pc_x.shape[0]
    tol_sun = _SUN_TOLERANCE_FRACTION * tol
    sub = min(2.0 * _SUB_CELL_FRACTION, _SUB_CELL_FRACTION * (tol_sun / _SUB_CELL_TOLERANCE) ** 0.25)
    conv = True
    npc = np.int64(0)  # (not a literal 0: numba would compile the callees for Literal[int](0) too)
    for part in range(4):
        lo = lo0 if part < 2 else lo1
        hi = hi0 if part < 2 else hi1
        gap = 1e-9 + 1e-13 * abs(hi)
        if s_tan > lo + gap and s_tan < hi - gap:
            if part % 2 == 0:
                hi = s_tan
            else:
                lo = s_tan
        elif part % 2 == 1:
            continue
        if not hi - lo > gap:
            continue
        nb = _grazing_points(o, v, lo + gap, hi - gap, radius, kinds, tidx, talt, bp3, np.int64(0))
        _sort_prefix(bp3, nb)
        a = lo
        i = 0
        while True:
            while i < nb and bp3[i] - a <= gap:
                i += 1  # merge break points closer than `gap`
            if i >= nb:
                b = hi
                c = 0.5 * (a + b)
            else:
                c = bp3[i]
                i += 1
                while i < nb and bp3[i] - c <= gap:
                    i += 1
                b = bp3[i] if i < nb else hi
                i += 1
                if min(c - a, b - c) < 0.2 * (b - a):  # too lopsided for the coarse quadratic
                    b = c
                    c = 0.5 * (a + b)
                    i -= 1
            if npc >= maxpc:
                conv = False
                break
            pc_x[npc, 0] = a
            pc_x[npc, 1] = c
            pc_x[npc, 2] = b
            first = 0
            if npc > 0 and pc_x[npc - 1, 2] == a:  # shares its first sample with the previous piece
                first = 1
                for q in range(npop):
                    pc_n[npc, 0, q] = pc_n[npc - 1, _PIECE_NODES - 1, q]
            for k in range(first, _PIECE_NODES):
                if not _piece_sample(npc, k, o, v, radius, r_top, kinds, kinds_an, params, tidx, talt, tdist, tval,
                                     tol_sun, sub, bp2, pa2, pb2, pval2, perr2, plit2, nsun, nsunlit, dens, acc,
                                     o2, v2, pc_x, pc_n):
                    conv = False
            _piece_stats(npc, pc_x, pc_n, pc_log, pc_islog, pc_err, pc_mean, pc_col, pa, pb, pval, plit, npan)
            npc += 1
            a = b
            if not b < hi:
                break
    while npc > 0:
        for p in range(npop):
            colsum[p] = 0.0
            nmax[p] = 0.0
            for q in range(npop):
                est[p, q] = 0.0
                target[p, q] = 0.0
        for j in range(npc):
            for q in range(npop):
                for k in range(_PIECE_NODES):
                    nmax[q] = max(nmax[q], pc_n[j, k, q])
            for p in range(npop):
                colsum[p] += pc_col[j, p]
                for q in range(npop):
                    est[p, q] += pc_col[j, p] * pc_err[j, q]
                    target[p, q] += pc_col[j, p] * pc_mean[j, q]
        done = True
        for p in range(npop):
            for q in range(npop):
                est[p, q] *= _PIECE_ERROR_FACTOR
                target[p, q] = tol * max(target[p, q], floor_frac * colsum[p] * nmax[q], 1e-300)
                if est[p, q] > target[p, q]:
                    done = False
        if done:
            break
        if npc >= maxpc:
            conv = False
            break
        worst = 0.0
        iw = np.int64(-1)
        for j in range(npc):
            score = 0.0
            for p in range(npop):
                for q in range(npop):
                    if est[p, q] > target[p, q]:
                        score = max(score, pc_col[j, p] * pc_err[j, q] / target[p, q])
            if score > worst:
                worst = score
                iw = j
        if iw < 0 or not (pc_x[iw, 1] - pc_x[iw, 0] > 1e-9 and pc_x[iw, 2] - pc_x[iw, 1] > 1e-9):
            conv = False  # nothing left to refine at round-off width
            break
        # bisect at c: samples 0-2 of the parent become 0, 2, 4 of the left half, 2-4 those of the right
        pc_x[npc, 0] = pc_x[iw, 1]
        pc_x[npc, 1] = 0.5 * (pc_x[iw, 1] + pc_x[iw, 2])
        pc_x[npc, 2] = pc_x[iw, 2]
        pc_x[iw, 2] = pc_x[iw, 1]
        pc_x[iw, 1] = 0.5 * (pc_x[iw, 0] + pc_x[iw, 1])
        for q in range(npop):
            pc_n[npc, 0, q] = pc_n[iw, 2, q]
            pc_n[npc, 2, q] = pc_n[iw, 3, q]
            pc_n[npc, 4, q] = pc_n[iw, 4, q]
            pc_n[iw, 4, q] = pc_n[iw, 2, q]
            pc_n[iw, 2, q] = pc_n[iw, 1, q]
        for j in (iw, npc):
            for k in range(1, _PIECE_NODES, 2):
                if not _piece_sample(j, k, o, v, radius, r_top, kinds, kinds_an, params, tidx, talt, tdist, tval,
                                     tol_sun, sub, bp2, pa2, pb2, pval2, perr2, plit2, nsun, nsunlit, dens, acc,
                                     o2, v2, pc_x, pc_n):
                    conv = False
            _piece_stats(j, pc_x, pc_n, pc_log, pc_islog, pc_err, pc_mean, pc_col, pa, pb, pval, plit, npan)
        npc += 1
    return npc, conv


@_leaf
def _extinction_part(a, b, jp, l, o, v, radius, kinds, params, tidx, talt, tdist, tval, dens, kd, cum, pc_x,
                      pc_n, pc_log, pc_islog, k_sun, k_obs):
    """Add int_a^b n_p (N_q^sun + N_q^obs) ds to k_sun, k_obs[:, :, l] by the 15-point Kronrod rule.

    N^sun from piece jp (none if jp < 0); N^obs = cum[q] (the column from the ray start to a)
    plus the integral of the 15-node interpolant of n_q (GK_S); cum is advanced to b.
    """
    npop = kinds.shape[0]
    half = 0.5 * (b - a)
    mid = 0.5 * (a + b)
    for g in range(GK_X.shape[0]):
        s = mid + half * GK_X[g]
        _densities_at(o[0] + s * v[0], o[1] + s * v[1], o[2] + s * v[2], radius, kinds, params, tidx, talt, tdist,
                      tval, dens)
        for q in range(npop):
            kd[g, q] = dens[q]
    for j in range(GK_X.shape[0]):
        s = mid + half * GK_X[j]
        w = half * GK_WK[j]
        for q in range(npop):
            part = 0.0
            for g in range(GK_X.shape[0]):
                part += GK_S[j, g] * kd[g, q]
            nobs = cum[q] + half * part
            ns = _piece_value(jp, s, q, pc_x, pc_n, pc_log, pc_islog) if jp >= 0 else 0.0
            for p in range(npop):
                k_sun[p, q, l] += w * kd[j, p] * ns
                k_obs[p, q, l] += w * kd[j, p] * nobs
    for q in range(npop):
        part = 0.0
        for g in range(GK_X.shape[0]):
            part += GK_WK[g] * kd[g, q]
        cum[q] += half * part


@_leaf
def _extinction_weights(l, o, v, radius, kinds, params, tidx, talt, tdist, tval, pa, pb, pval, plit, npan, order,
                        pc_x, pc_n, pc_log, pc_islog, npc, pc_start, pc_order, dens, kd, cum, nobs, k_sun, k_obs):
    """Fill k_sun, k_obs[:, :, l]: the 15-point Kronrod rule (which converged the columns) on each sunlit
    panel cut at the piece ends, so that n_p and the interpolated N_q^sun are both smooth on every part
    (N^sun can steepen sharply toward a shadow edge). order, pc_order, cum, nobs: scratch.
    """
    npop = kinds.shape[0]
    for j in range(npc):
        pc_start[j] = pc_x[j, 0]
    _argsort(pc_start, npc, pc_order)
    _argsort(pa, npan, order)
    jj = 0
    for p in range(npop):
        cum[p] = 0.0
    for ii in range(npan):
        i = order[ii]
        if plit[i]:
            for q in range(npop):
                nobs[q] = cum[q]
            a = pa[i]
            while jj < npc - 1 and pc_x[pc_order[jj], 2] <= a:
                jj += 1
            while True:
                b = pb[i]
                if jj < npc - 1:
                    b = min(b, pc_x[pc_order[jj], 2])
                if b > a:
                    _extinction_part(a, b, pc_order[jj] if npc > 0 else -1, l, o, v, radius, kinds, params, tidx,
                                     talt, tdist, tval, dens, kd, nobs, pc_x, pc_n, pc_log, pc_islog, k_sun, k_obs)
                if b >= pb[i]:
                    break
                a = b
                jj += 1
        for q in range(npop):
            cum[q] += pval[i, q]


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
        Relative tolerance of the ray columns and of the extinction weights (the sunward
        columns N^sun themselves are integrated to _SUN_TOLERANCE_FRACTION * tol_inner).
    floor_frac : float
        Sunlit columns below floor_frac * total column are converged to tol * floor_frac * total;
        likewise K_pq below floor_frac * (sunlit column of p) * max N_q^sun.
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
    kd = np.empty((GK_X.shape[0], npop))
    bp3 = np.empty(max_breaks)
    kinds_an = kinds.copy()  # the populations _adaptive integrates along sunward rays
    for p in range(npop):
        if kinds[p] == _K_TAB:
            kinds_an[p] = _K_SKIP
    maxpc = 2 * max_breaks + _MAX_BISECTIONS  # initial pieces (<= 2 intervals x break points) + bisections
    pc_x = np.empty((maxpc, 3))
    pc_start = np.empty(maxpc)
    pc_order = np.empty(maxpc, dtype=np.int64)
    order = np.empty(max_panels, dtype=np.int64)
    pc_n = np.empty((maxpc, _PIECE_NODES, npop))
    pc_log = np.empty((maxpc, _PIECE_NODES, npop))
    pc_islog = np.empty((maxpc, npop), dtype=np.bool_)
    pc_err = np.empty((maxpc, npop))
    pc_mean = np.empty((maxpc, npop))
    pc_col = np.empty((maxpc, npop))
    est = np.empty((npop, npop))
    target = np.empty((npop, npop))
    colsum = np.empty(npop)
    nmax = np.empty(npop)
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
        # N^sun on interpolation pieces of the sunlit intervals [s0, s1] minus (dlo, dhi)
        npc, conv2 = _sun_pieces(o, v, s0, min(s1, dlo), max(s0, dhi), s1, -bq, radius, r_top, kinds, kinds_an, params,
                                 tidx, talt, tdist, tval, tol_inner, floor_frac, pa, pb, pval, plit, npan,
                                 bp2, pa2, pb2, pval2, perr2, plit2, nsun, nsunlit, dens_q, acc, o2, v2,
                                 bp3, pc_x, pc_n, pc_log, pc_islog, pc_err, pc_mean, pc_col,
                                 est, target, colsum, nmax)
        if not conv2:
            converged[l] = False
        _extinction_weights(l, o, v, radius, kinds, params, tidx, talt, tdist, tval, pa, pb, pval, plit, npan, order,
                            pc_x, pc_n, pc_log, pc_islog, npc, pc_start, pc_order, dens, kd, cum, nobs, k_sun, k_obs)
