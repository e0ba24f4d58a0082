"""The certified validity checks (compiled): critical points, the near-circle, single-valued
surfaces, a simple contour and the floor, each proved, refuted by a witness, or given up.
"""

from __future__ import annotations

import math

import numpy as np

from foilmap.section._kcache import kernel
from foilmap.section._kconst import (
    _BUDGET, C_ABSC2, C_ARG1H, C_GDTE, C_KAPPA, C_L1, C_L2, C_M3, C_MM, C_OMH1, _HALF_PI, _INF,
    _M_ST, _STACK, _TWO_PI, V_BRANCH_CUT, V_CRITICAL, V_CROSSED, V_FOLDED, V_NON_FINITE,
    V_NOT_STARLIKE, V_OK, V_SINGULAR, V_UNCERTIFIED,
)
from foilmap.section._kmap import (
    _arg_dist, _D_LN_DIST_TE, _deriv, _grid_phi, _illinois, _interp, map_point, _map_zeta,
    _stations,
)
from foilmap.section._kbounds import _prepare, _split_arc_bounds, _workspace
from foilmap.section._kfloor import _floor_check, floor_stations, _point_at_x


@kernel
def _push_halves(sc, sd, top, c, d):
    """Replace the arc |φ − c| ≤ d on a branch-and-bound stack by its two halves; the new top."""
    sc[top] = c - 0.5 * d
    sd[top] = 0.5 * d
    sc[top + 1] = c + 0.5 * d
    sd[top + 1] = 0.5 * d
    return top + 2


@kernel
def _schur_cohn(a, radius):
    """Whether every critical point of stage 1 (root of ζᴺ − Σ n Aₙ ζ^{N−n}) lies inside
    |ζ| < radius: the Schur–Cohn recursion (Henrici, Applied and Computational Complex
    Analysis, vol. 1, §6.8), exact apart from round-off."""
    n = a.shape[0]
    poly = np.empty(n + 1, dtype=np.complex128)
    poly[n] = 1.0
    for m in range(1, n + 1):
        poly[n - m] = -m * a[m - 1]
    sc = 1.0
    for i in range(n + 1):
        poly[i] *= sc
        sc *= radius
    deg = n
    while deg > 0:
        c0 = poly[0]
        cm = poly[deg]
        if not abs(cm) > abs(c0):
            return False
        nxt = np.empty(deg, dtype=np.complex128)
        cmc = cm.conjugate()
        for i in range(1, deg + 1):
            nxt[i - 1] = cmc * poly[i] - c0 * poly[deg - i].conjugate()
        lead = nxt[deg - 1]
        if lead == 0:
            return False
        for i in range(deg):
            poly[i] = nxt[i] / lead
        deg -= 1
    return True


@kernel
def _validity_map(a, a0, k, consts, phis, gs, es, hs, oks, gds, margin, sc, sd, ste, ws, wb,
                  wi):
    """Certified checks of the near-circle (stage 1 and the second singular point).

    Returns (code, distance).  1. Star shape: Re(1 − h) > 0 on the circle makes the near-circle
    star-shaped about 0, hence simple and one-to-one (Darboux), meeting the positive real axis
    only at z₁ = 1 and the negative one once, at x_π.  2. z₁ = −1 inside and the cut [−1, 1)
    outside the flow: x_π < −1.  3. |g + 1| > δ₂ on every arc (|g_m + 1| − Gδ > δ₂).
    A check rejects with a witness (a point where it fails) or gives up (V_UNCERTIFIED) when
    its budget or stack runs out.  The Kármán–Trefftz stage is checked afterwards
    (:func:`_certify`).
    """
    l1, l2 = consts[C_L1], consts[C_L2]
    p = phis.shape[0]
    step = _TWO_PI / p
    # 1. star shape
    if l1 >= 1.0:
        top = 0
        for j in range(p):
            v = 1.0 - hs[j].real
            if v <= 0.0:
                return V_NOT_STARLIKE, 0.0
            if v - l2 * 0.5 * step <= 0.0:
                sc[top] = phis[j]
                sd[top] = 0.5 * step
                top += 1
        spent = 0
        while top > 0:
            top -= 1
            c = sc[top]
            d = sd[top]
            h = map_point(a, a0, k, c)[2]
            v = 1.0 - h.real
            if v <= 0.0:
                return V_NOT_STARLIKE, 0.0
            if v - l2 * d > 0.0:
                continue
            spent += 1
            if spent > _BUDGET or top + 2 >= sc.shape[0]:
                return V_UNCERTIFIED, 0.0  # gave up: no witness either way
            top = _push_halves(sc, sd, top, c, d)
    # 2. the negative real-axis crossing, where arg g passes π (once: star shape)
    jx = -1
    for j in range(1, p):
        if gs[j - 1].imag > 0.0 and gs[j].imag <= 0.0 and gs[j].real < 0.0:
            jx = j
            break
    if jx < 0:
        return V_BRANCH_CUT, 0.0
    lo = phis[jx - 1]
    hi = phis[jx]
    for _ in range(100):
        if hi - lo <= 1e-14:
            break
        mid = 0.5 * (lo + hi)
        if map_point(a, a0, k, mid)[0].imag > 0.0:
            lo = mid
        else:
            hi = mid
    if not map_point(a, a0, k, 0.5 * (lo + hi))[0].real < -1.0:
        return V_BRANCH_CUT, 0.0
    # 3. distance from −1, certified by branch and bound
    dmin = _INF
    top = 0
    for j in range(p):
        dist = abs(gs[j] + 1.0)
        dmin = min(dmin, dist)
        if dist <= margin:
            return V_SINGULAR, dist
        if not (oks[j] and dist - gds[j] * 0.5 * step > margin):
            sc[top] = phis[j]
            sd[top] = 0.5 * step
            top += 1
    spent = 0
    while top > 0:
        top -= 1
        c = sc[top]
        d = sd[top]
        g, e, h, _, _, _ = map_point(a, a0, k, c)
        dist = abs(g + 1.0)
        dmin = min(dmin, dist)
        if dist <= margin:
            return V_SINGULAR, dist
        gd = abs(e) * math.exp(l1 * d) * (abs(1.0 - h) + l2 * d)
        if dist - gd * d > margin:
            continue
        spent += 1
        if spent > _BUDGET or top + 2 >= sc.shape[0]:
            return V_UNCERTIFIED, dmin  # gave up: no witness either way
        top = _push_halves(sc, sd, top, c, d)
    return V_OK, dmin


@kernel
def _t_box(a, a0, k, l1, l2, c, d):
    """:func:`_t_box_at` for the arc |φ − c| ≤ d."""
    g, e, h, _, _, _ = map_point(a, a0, k, c)
    return _t_box_at(g, e, h, l1, l2, d, math.exp(l1 * d))


@kernel
def _t_box_at(g, e, h, l1, l2, d, x):
    """Box (|t| low, high, arg t low, high) holding t = (z₁ − 1)/(z₁ + 1) over an arc of
    half-width d whose centre maps to (g, e, h), with x = e^{L1 d}: the near-circle stays in
    D(g_m, R), R = |e| x (|1 − h| + L2 d) d, whose Möbius image is a disc (centre t_c,
    radius ρ).  An unbounded box asks for a split."""
    rad = abs(e) * x * (abs(1.0 - h) + l2 * d) * d
    c1 = g + 1.0
    cc = abs(c1)
    if cc <= rad * 1.000001:
        return 0.0, _INF, -math.pi, math.pi
    den = cc * cc - rad * rad
    tc = 1.0 - 2.0 * c1.conjugate() / den
    rt = 2.0 * rad / den
    atc = abs(tc)
    if rt >= atc * 0.999999:
        return 0.0, _INF, -math.pi, math.pi
    at = math.atan2(tc.imag, tc.real)
    var = math.asin(rt / atc)
    if abs(at) + var >= math.pi:
        return 0.0, _INF, -math.pi, math.pi
    return atc - rt, atc + rt, at - var, at + var


@kernel
def _te_excess(psi, consts):
    """E(ψ): bound of |arg t − β± − κφ| at distance ψ = |φ| from the trailing edge.

    g − 1 = iφ(1 − h(1))(1 + w), w = φ c₂ + ε, |ε| ≤ M₃ψ²/(6|1 − h(1)|); g + 1 = 2(1 + v),
    v = iφ(1 − h(1))/2 + η, |η| ≤ Mψ²/4, |v| ≤ Gψ/2; |arg(1 + w) − Im w| ≤ |w|²/(2(1 − |w|)).
    """
    gdte, mm, omh1 = consts[C_GDTE], consts[C_MM], consts[C_OMH1]
    m3, absc2 = consts[C_M3], consts[C_ABSC2]
    eps = m3 * psi * psi / (6.0 * omh1)
    om = psi * absc2 + eps
    nu = 0.5 * gdte * psi
    if om >= 1.0 or nu >= 1.0:
        return _INF
    return eps + om * om / (2.0 * (1.0 - om)) + 0.25 * mm * psi * psi + nu * nu / (2.0 * (1.0 - nu))


@kernel
def _te_box(sigma, psa, psb, consts):
    """Box (|t| low, high, arg t low, high) over the distances [ψa, ψb] from the trailing edge
    on the side σ (+1 upper, −1 lower), from the expansion arg t = β_σ + κφ ± E(ψ) and
    |t| ∈ [ψ(|1 − h(1)| − Mψb/2)/(2 + Gψb), Gψb/(2 − Gψb)]."""
    gdte, mm, omh1 = consts[C_GDTE], consts[C_MM], consts[C_OMH1]
    arg1h, kappa = consts[C_ARG1H], consts[C_KAPPA]
    e = _te_excess(psb, consts)
    x = gdte * psb
    lo = omh1 - 0.5 * mm * psb
    if e == _INF or x >= 2.0 or lo <= 0.0:
        return 0.0, _INF, -math.pi, math.pi
    beta = sigma * _HALF_PI + arg1h
    s1 = sigma * kappa * psa
    s2 = sigma * kappa * psb
    rlo = psa * lo / (2.0 + x) if psa > 0.0 else 0.0
    return rlo, x / (2.0 - x), beta + min(s1, s2) - e, beta + max(s1, s2) + e


@kernel
def _stage2_simple(a, a0, k, consts, phis, gs, es, hs, ws, wb, wi, free):
    """Certify that the Kármán–Trefftz stage is one-to-one on the flow, i.e. that the contour
    does not cross itself.  True when certified; False when it gives up (it never proves a
    crossing: the witness is :func:`_crossing_witness`).

    ``free`` = (φ₀, φ₁, φ₂, φ₃): arcs inside [φ₀, φ₁] (upper surface) or [φ₂, φ₃] (lower) are
    known to meet no other point of the contour (the floor certificate showed the surfaces
    apart at every x there, and each surface is single-valued in x), so they are left out of
    the pairs; an empty range (φ₀ > φ₁) leaves out nothing.

    t^k (principal) takes the same value at two points t₁ ≠ t₂ of the slit plane only where
    |t₁| = |t₂| and arg t₁ − arg t₂ = ±2π/k.  The arcs of the circle are boxed in
    (|t|, arg t): by the Möbius image of the disc that holds the near-circle over the arc
    (:func:`_t_box`), intersected near the trailing edge with the box of the edge expansion
    (:func:`_te_box`).  A crossing needs two boxes that overlap in |t| and whose args can
    differ by 2π/k; such boxes are split until none remain (certified) or the budget runs out
    (the section is rejected).  The two arcs that end at the edge, where t → 0 and the args
    tend to β± (exactly π apart), are cleared against each other when f(ψ) = κψ + E(ψ), which
    is convex with f(0) = 0, satisfies 2 max(f(b), 0) < 2π/k − π, or f(b) < 0; at a cusp
    (2π/k = π) also when κb − E(b) > 0 (their args then differ by more than π).
    """
    l1, l2 = consts[C_L1], consts[C_L2]
    p = phis.shape[0]
    step = _TWO_PI / p
    w = _TWO_PI / k
    slack = w - math.pi
    cen, hw, rlo, rhi, alo, ahi = ws[0], ws[1], ws[2], ws[3], ws[4], ws[5]
    te = wb[0]
    mark = wb[1]
    cap = cen.shape[0]
    hidx = wi[0]
    lidx = wi[1]
    mark[: p] = True
    n = 0
    for j in range(p):
        cen[n] = phis[j]
        hw[n] = 0.5 * step
        te[n] = j == 0 or j == p - 1
        n += 1
    near = 0.25  # arcs within this angle of the edge also get the expansion box
    x_grid = math.exp(l1 * 0.5 * step)  # e^{L1 d} of the grid's arcs
    for rnd in range(80):
        te_pair_ok = True
        for i in range(n):
            if te[i]:
                b = 2.0 * hw[i]
                ex = _te_excess(b, consts)
                f = consts[C_KAPPA] * b + ex
                # args of the two edge arcs differ by π + κ(ψ₁ + ψ₂) ± (E(ψ₁) + E(ψ₂)), and
                # E(ψ) ≤ (ψ/b) E(b) (convex, E(0) = 0): below 2π/k where f(b) < 0 or
                # 2 max(f(b), 0) < 2π/k − π; above it at a cusp (2π/k = π) where κb > E(b)
                if not (f < 0.0 or 2.0 * max(f, 0.0) < slack
                        or (slack <= 0.0 and consts[C_KAPPA] * b - ex > 0.0)):
                    te_pair_ok = False
            if not mark[i]:
                continue
            c = cen[i]
            d = hw[i]
            mark[i] = False
            if (free[0] <= c - d and c + d <= free[1]) or (free[2] <= c - d and c + d <= free[3]):
                rlo[i] = _INF  # meets nothing: in no pair, never split
                rhi[i] = -_INF
                alo[i] = _INF
                ahi[i] = -_INF
                continue
            sigma = 1.0 if c < math.pi else -1.0
            psi_c = c if c < math.pi else _TWO_PI - c
            if te[i]:
                r0, r1, a0_, a1_ = _te_box(sigma, 0.0, 2.0 * d, consts)
            elif rnd == 0:
                r0, r1, a0_, a1_ = _t_box_at(gs[i], es[i], hs[i], l1, l2, d, x_grid)
            else:
                r0, r1, a0_, a1_ = _t_box(a, a0, k, l1, l2, c, d)
                if psi_c + d < near:
                    q0, q1, b0, b1 = _te_box(sigma, psi_c - d, psi_c + d, consts)
                    r0 = max(r0, q0)
                    r1 = min(r1, q1)
                    a0_ = max(a0_, b0)
                    a1_ = min(a1_, b1)
            rlo[i] = r0
            rhi[i] = r1
            alo[i] = a0_
            ahi[i] = a1_
        lo_all = _INF
        hi_all = -_INF
        for i in range(n):
            lo_all = min(lo_all, alo[i])
            hi_all = max(hi_all, ahi[i])
        if hi_all - lo_all < w:
            return True
        # only arcs that reach the top (H) can pair with arcs that reach the bottom (L)
        nh = 0
        nl = 0
        for i in range(n):
            if ahi[i] - lo_all >= w:
                hidx[nh] = i
                nh += 1
            if hi_all - alo[i] >= w:
                lidx[nl] = i
                nl += 1
        any_mark = False
        for ii in range(nh):
            i = hidx[ii]
            for jj in range(nl):
                j = lidx[jj]
                if te[i] and te[j] and i != j and te_pair_ok:
                    continue
                if rlo[i] < rhi[j] and rlo[j] < rhi[i] and ahi[i] - alo[j] >= w:
                    mark[i] = True
                    mark[j] = True
                    any_mark = True
        if not any_mark:
            return True
        m = n
        for i in range(m):
            if not mark[i]:
                continue
            if n + 1 >= cap or hw[i] < 1e-13:
                return False
            d = 0.5 * hw[i]
            c = cen[i]
            # the child next to the trailing edge keeps the edge flag
            left_te = te[i] and c < math.pi
            right_te = te[i] and c > math.pi
            cen[i] = c - d
            hw[i] = d
            te[i] = left_te
            cen[n] = c + d
            hw[n] = d
            te[n] = right_te
            mark[n] = True
            n += 1
    return False


@kernel
def _validity_fold(a, a0, k, consts, phis, dzs, q2s, oks, kzs, dlogs, phi_le, scale_arg,
                   sc, sd, ste):
    """Certified single-valued surfaces: the chord-frame x runs one way on each surface.

    On an arc the tangent angle θ = arg(iζ z'·scale) moves by at most δ(1 + |D ln z'|); an arc
    is cleared where that keeps cos θ of its surface's sign (negative on the upper surface,
    positive on the lower).  The arc holding the leading edge is cleared where the nose is
    convex over it, Re(1 + ζz''/z') − δ |D² ln z'| > 0 (the tangent turns one way, so x has at
    most one extremum there, the leading edge; arcs within 1e-9 rad of it are treated alike,
    so that a leading edge on an arc's end is not chased by splitting).  The arcs at the trailing edge use the tangent's
    expansion θ → π/2 + arg(1 − h(1)) + (k − 1)(±π/2 + arg(1 − h(1))) + arg(scale).
    Returns V_OK, V_FOLDED (an arc of 1e-13 rad still turns past vertical) or V_UNCERTIFIED
    (budget or stack spent).
    """
    l1, l2, gdte = consts[C_L1], consts[C_L2], consts[C_GDTE]
    mm, omh1, arg1h = consts[C_MM], consts[C_OMH1], consts[C_ARG1H]
    p = phis.shape[0]
    step = _TWO_PI / p
    top = 0
    for j in range(p):
        c = phis[j]
        te = j == 0 or j == p - 1
        if not te and oks[j]:
            d = 0.5 * step
            tang = 1j * complex(math.cos(c), math.sin(c)) * dzs[j]
            theta = math.atan2(tang.imag, tang.real) + scale_arg
            v = d * (1.0 + dlogs[j])
            if c - d - 1e-9 <= phi_le <= c + d + 1e-9:
                if (1.0 + q2s[j].real) - kzs[j] * d > 0.0 and v < _HALF_PI:
                    continue
            elif _arg_dist(theta, math.pi if c < phi_le else 0.0) + v < _HALF_PI:
                continue
        sc[top] = c
        sd[top] = 0.5 * step
        ste[top] = te
        top += 1
    spent = 0
    while top > 0:
        top -= 1
        c = sc[top]
        d = sd[top]
        te = ste[top]
        upper = c < phi_le
        if te:
            b = 2.0 * d
            sign = 1.0 if c < math.pi else -1.0
            theta0 = _HALF_PI + arg1h + (k - 1.0) * (sign * _HALF_PI + arg1h) + scale_arg
            x = 0.5 * b * gdte
            if x < 1.0 and mm * b < 2.0 * omh1 and l2 * b < omh1:
                tmax = 2.0 * x / (2.0 - 2.0 * x)
                v = (b * (1.0 + l1) + math.asin(l2 * b / omh1)
                     + (k - 1.0) * (math.asin(0.5 * mm * b / omh1) + math.asin(x))
                     + 2.0 * math.asin(x) + 2.0 * math.asin(min(1.0, tmax**k)))
                if _arg_dist(theta0, math.pi if upper else 0.0) + v < _HALF_PI:
                    continue
        else:
            zc = complex(math.cos(c), math.sin(c))
            g, e, h, z, dz, q2 = _map_zeta(a, a0, k, zc)
            ok, zmin, kz, dlog, gd = _split_arc_bounds(a, zc, g, e, h, d, k, consts)
            if ok:
                tang = 1j * zc * dz
                theta = math.atan2(tang.imag, tang.real) + scale_arg
                v = d * (1.0 + dlog)
                if c - d - 1e-9 <= phi_le <= c + d + 1e-9:
                    if (1.0 + q2.real) - kz * d > 0.0 and v < _HALF_PI:
                        continue
                elif _arg_dist(theta, math.pi if upper else 0.0) + v < _HALF_PI:
                    continue
        if d < 1e-13:
            return V_FOLDED  # the tangent turns past vertical on an arc of 1e-13 rad
        spent += 1
        if spent > _BUDGET or top + 2 >= sc.shape[0]:
            return V_UNCERTIFIED
        for i in range(2):
            sc[top] = c - 0.5 * d if i == 0 else c + 0.5 * d
            sd[top] = 0.5 * d
            ste[top] = te and ((i == 0 and c < math.pi) or (i == 1 and c > math.pi))
            top += 1
    return V_OK


@kernel
def _frame(a, a0, k, phis, zs):
    """Leading edge (farthest point from the TE z = k), refined to 1e-13 rad by the Illinois
    method on d/dφ ln|z − k| = −Im(ζ z'/(z − k)).  Returns (φ_LE, z_LE)."""
    p = phis.shape[0]
    step = _TWO_PI / p
    jb = 0
    best = -1.0
    for j in range(p):
        d = abs(zs[j] - k)
        if d > best:
            best = d
            jb = j
    x0 = phis[jb]
    d0 = _deriv(_D_LN_DIST_TE, a, a0, k, x0, 0.0)
    dp = _deriv(_D_LN_DIST_TE, a, a0, k, x0 + step, 0.0)
    if (d0 > 0.0) != (dp > 0.0):
        lo, hi, flo, fhi = x0, x0 + step, d0, dp
    else:
        lo, hi, flo, fhi = x0 - step, x0, _deriv(_D_LN_DIST_TE, a, a0, k, x0 - step, 0.0), d0
    if (flo > 0.0) != (fhi > 0.0):
        x0 = _illinois(_D_LN_DIST_TE, a, a0, k, 0.0, lo, hi, flo, fhi)
    z_le = map_point(a, a0, k, x0)[3]
    return x0, z_le


@kernel
def _exact_point(a, a0, k, z_le, scale, keys, yk, pk, key, iterations):
    """Exact contour point at chord station |key| (key = −x upper, +x lower): Newton's method
    on x(φ) = x*, dx/dφ = Re(iζ z'·scale), started from the interpolated circle angle.
    Returns (x + iy, dy/dx, φ)."""
    phi = _interp(key, keys, pk)
    xt = abs(key)
    for _ in range(iterations):
        g, e, h, z, dz, q2 = map_point(a, a0, k, phi)
        zc = (z - z_le) * scale
        zeta = complex(math.cos(phi), math.sin(phi))
        dxdphi = (1j * zeta * dz * scale).real
        stp = (zc.real - xt) / dxdphi
        if math.isfinite(stp):
            phi -= min(max(stp, -0.1), 0.1)
    g, e, h, z, dz, q2 = map_point(a, a0, k, phi)
    zc = (z - z_le) * scale
    dzc = complex(math.cos(phi), math.sin(phi)) * dz * scale
    return zc, dzc.real / -dzc.imag, phi


@kernel
def _contour_keys(phis, zs, dzs, phi_le, z_le, scale, keys, yk, pk, dk):
    """The contour in the chord frame laid along one increasing key, −x on the upper surface
    and +x on the lower, with its y, circle angle and dφ/dkey (NaN at the edges and the
    leading edge), for interpolated starting points.  Returns the number of keys."""
    p = phis.shape[0]
    n = 0
    keys[n] = -1.0
    yk[n] = 0.0
    pk[n] = 0.0
    dk[n] = math.nan
    n += 1
    jle = p
    for j in range(p):
        if phis[j] >= phi_le:
            jle = j
            break
        zc = (zs[j] - z_le) * scale
        keys[n] = -zc.real
        yk[n] = zc.imag
        pk[n] = phis[j]
        dk[n] = -1.0 / (1j * complex(math.cos(phis[j]), math.sin(phis[j])) * dzs[j] * scale).real
        n += 1
    keys[n] = 0.0
    yk[n] = 0.0
    pk[n] = phi_le
    dk[n] = math.nan
    n += 1
    for j in range(jle, p):
        zc = (zs[j] - z_le) * scale
        keys[n] = zc.real
        yk[n] = zc.imag
        pk[n] = phis[j]
        dk[n] = 1.0 / (1j * complex(math.cos(phis[j]), math.sin(phis[j])) * dzs[j] * scale).real
        n += 1
    keys[n] = 1.0
    yk[n] = 0.0
    pk[n] = _TWO_PI
    dk[n] = math.nan
    return n + 1


@kernel
def _crossing_witness(a, a0, k, z_le, scale, kv, yv, pv, phi_le, xs):
    """A witness that the surfaces cross: a station of ``xs`` where the sampled contour puts
    the upper surface below the lower one and the exact points confirm it."""
    for i in range(xs.shape[0]):
        x = xs[i]
        if _interp(-x, kv, yv) - _interp(x, kv, yv) < 0.0:
            zu, _, oku = _point_at_x(a, a0, k, z_le, scale, _interp(-x, kv, pv), 1e-12, phi_le,
                                     x, -1.0)
            zl, _, okl = _point_at_x(a, a0, k, z_le, scale, _interp(x, kv, pv), phi_le,
                                     _TWO_PI - 1e-12, x, 1.0)
            if oku and okl and zu.imag - zl.imag < 0.0:
                return True
    return False


@kernel
def _certify(a, a0, k, consts, phis, gs, es, hs, zs, dzs, q2s, oks, zmins, kzs, dlogs, gds,
             margin, t0, xst, xs, keys, yk, pk, fs, cbs, sc, sd, ste, ws, wb, wi):
    """Every validity check of one prepared section, cheapest and most often failing first.

    1. The near-circle (:func:`_validity_map`).  2. The chord frame (:func:`_frame`) and
    single-valued surfaces (:func:`_validity_fold`).  3. A crossing witness at the stations
    ``xs`` (:func:`_crossing_witness`), so that a crossed section is rejected in microseconds.
    4. The floor (:func:`_floor_check`; with t₀ = 0, positive thickness), which also shows the
    surfaces apart from FLOOR_START to the last tail station.  5. A simple contour
    (:func:`_stage2_simple`) over the arcs the floor did not clear: the nose and the last
    stretch of the trailing edge.

    Returns (code, φ_LE, z_LE, floor margin, number of contour keys).
    """
    code, _ = _validity_map(a, a0, k, consts, phis, gs, es, hs, oks, gds, margin, sc, sd, ste,
                            ws, wb, wi)
    if code != V_OK:
        return code, math.nan, 0j, math.nan, 0
    phi_le, z_le = _frame(a, a0, k, phis, zs)
    scale = 1.0 / (k - z_le)
    code = _validity_fold(a, a0, k, consts, phis, dzs, q2s, oks, kzs, dlogs, phi_le,
                          math.atan2(scale.imag, scale.real), sc, sd, ste)
    if code != V_OK:
        return code, math.nan, 0j, math.nan, 0
    dk = np.empty(keys.shape[0])
    nk = _contour_keys(phis, zs, dzs, phi_le, z_le, scale, keys, yk, pk, dk)
    kv = keys[:nk]
    yv = yk[:nk]
    pv = pk[:nk]
    if _crossing_witness(a, a0, k, z_le, scale, kv, yv, pv, phi_le, xs):
        return V_CROSSED, math.nan, 0j, math.nan, 0
    free = np.array([1.0, 0.0, 1.0, 0.0])
    code, fmargin = _floor_check(a, a0, k, consts, z_le, scale, kv, yv, pv, dk[:nk], phi_le,
                                 t0, xst, fs, free, (dzs, q2s, oks, zmins, kzs), cbs)
    if code != V_OK:
        return code, math.nan, 0j, math.nan, 0
    if t0 <= 0.0:
        fmargin = math.nan
    if not _stage2_simple(a, a0, k, consts, phis, gs, es, hs, ws, wb, wi, free):
        return V_UNCERTIFIED, math.nan, 0j, math.nan, 0
    return V_OK, phi_le, z_le, fmargin, nk


@kernel
def _validity_one(a, tau, zeta, phis, crit_radius, margin, t0, xst, xs, keys, yk, pk, fs, sc,
                  sd, ste, ws, wb, wi):
    """Status code and floor margin of one section (:func:`_certify`)."""
    if not _schur_cohn(a, crit_radius):
        return V_CRITICAL, math.nan
    a0, k, consts, gs, es, hs, zs, dzs, q2s, oks, zmins, kzs, dlogs, gds = _prepare(a, tau, zeta)
    code, _, _, fmargin, _ = _certify(a, a0, k, consts, phis, gs, es, hs, zs, dzs, q2s, oks,
                                      zmins, kzs, dlogs, gds, margin, t0, xst, xs, keys, yk, pk,
                                      fs, np.empty(phis.shape[0]), sc, sd, ste, ws, wb, wi)
    return code, fmargin


@kernel
def critical_batch(coeffs, radius):
    """:func:`_schur_cohn` for each row, shape (B,) bool."""
    out = np.empty(coeffs.shape[0], dtype=np.bool_)
    for i in range(coeffs.shape[0]):
        out[i] = _schur_cohn(coeffs[i], radius)
    return out


@kernel
def validity_batch(coeffs, tau, points, crit_radius, margin, floor=0.0):
    """Certified validity of each section: status codes (B,) (0 valid; see
    foilmap.section.status) and the floor margin (B,) (the least thickness minus the floor over
    the floor's stations, NaN without a floor or where invalid).  ``floor`` is the
    local-thickness floor t₀ in chords (0: none)."""
    nb = coeffs.shape[0]
    phis = _grid_phi(points)
    zeta = np.exp(1j * phis)
    code = np.zeros(nb, dtype=np.int8)
    fm = np.full(nb, np.nan)
    sc, sd, ste, ws, wb, wi = _workspace(points)
    xst = floor_stations()
    xs = _stations(_M_ST)
    keys = np.empty(points + 3)
    yk = np.empty(points + 3)
    pk = np.empty(points + 3)
    fs = np.empty((8, _STACK))
    for i in range(nb):
        if not (np.all(np.isfinite(coeffs[i].real)) and np.all(np.isfinite(coeffs[i].imag))
                and math.isfinite(tau[i])):
            code[i] = V_NON_FINITE
            continue
        c, m = _validity_one(coeffs[i], tau[i], zeta, phis, crit_radius, margin, floor, xst, xs,
                             keys, yk, pk, fs, sc, sd, ste, ws, wb, wi)
        code[i] = c
        fm[i] = m
    return code, fm
