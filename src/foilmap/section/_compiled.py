"""Compiled per-section kernels (numba): the map at a point, rigorous bounds of the map over arcs
of the circle, the peak suction and the validity checks certified between samples, and the fast
evaluation that searches call.

Why compiled: a search evaluates populations of 12 to 64 sections, and a numpy pipeline pays a
fixed cost per call (hundreds of small array operations) that swamps the work at those sizes.
Here a loop over the batch calls per-section code with no per-call overhead.  The numpy pipeline
in :mod:`foilmap.section.evaluation` stays as the reference implementation: it uses this module only for the
certified peak and validity, and a test holds the two to the same figures.

Notation on ζ = e^{iφ} (D = d/dφ): S = Σ Aₙ ζ⁻ⁿ, h = Σ n Aₙ ζ⁻ⁿ, e = g/ζ = exp(A₀ + S), so that
g' = e (1 − h) and D g = iζ g'.  With t = (z₁ − 1)/(z₁ + 1) the Kármán–Trefftz stage has
F'(z₁) = dz/dz₁ = k² t^{k−1} (1 − t)² / (1 − t^k)² (principal powers).  Exact constants of a
section: L1 = Σ n|Aₙ| ≥ |D S|, |h|;  L2 = Σ n²|Aₙ| ≥ |D h|, |D² S|;  L3 = Σ n³|Aₙ| ≥ |D² h|.
The bounds are derived in docs/method.md ("What is exact between samples").
"""

from __future__ import annotations

import cmath
import math

import numpy as np
from numba import njit

__all__ = ["PEAK_TOLERANCE", "map_point", "peak_batch", "validity_batch", "search_batch",
           "critical_batch", "warm_up", "FIGURES"]

#: relative tolerance of the certified peak speed: no point of the contour is faster than the
#: reported maximum q by more than this factor; the reported value itself is a local maximum
#: refined to round-off
PEAK_TOLERANCE = 1e-7
#: most arc evaluations one certification may spend before it gives up
_BUDGET = 20000
_STACK = 8192
_INF = math.inf
_TWO_PI = 2.0 * math.pi
_HALF_PI = 0.5 * math.pi

# validity codes (the values of foilmap.section.status.Status)
V_OK = 0
V_CRITICAL = 1
V_SINGULAR = 2
V_BRANCH_CUT = 3
V_FOLDED = 4
V_CROSSED = 5  # Status.NEGATIVE_THICKNESS: the surfaces cross
V_ABOVE_MAX_LIFT = 6
V_NON_FINITE = 7
V_NOT_STARLIKE = 8
V_THIN = 9  # Status.BELOW_FLOOR: the local thickness falls below the floor
V_UNCERTIFIED = 10  # Status.UNCERTIFIED: a certificate ran out of budget or stack

#: the local-thickness floor (docs/study-file.md, ``min_local_thickness``): full value t₀ on
#: FLOOR_NOSE ≤ x/c ≤ FLOOR_TAPER, rising linearly from 0 at the leading edge to t₀ at
#: FLOOR_NOSE, falling as ((1 − x)/(1 − FLOOR_TAPER))² into the trailing-edge wedge.  It holds
#: exactly at FLOOR_STATIONS stations on FLOOR_START ≤ x/c ≤ FLOOR_END (whose least clearance
#: is the figure ``floor_margin``) and at FLOOR_TAIL more stations that each take the distance
#: to the trailing edge down by FLOOR_TAIL_RATIO, and between all of them it is certified to
#: hold at least FLOOR_BETWEEN times (with no floor: the thickness certified positive there)
FLOOR_START = 0.005
FLOOR_NOSE = 0.05
FLOOR_TAPER = 0.8
FLOOR_END = 0.98
FLOOR_STATIONS = 25
FLOOR_TAIL = 12
FLOOR_TAIL_RATIO = 0.5
FLOOR_BETWEEN = 0.5
#: most interval splits the floor certificate may spend before it gives up
_FLOOR_BUDGET = 4000

#: columns of the figure array returned by :func:`search_batch`
FIGURES = ("cl", "alpha", "alpha_zero_lift", "lift_slope", "cl_max_ideal", "cm_quarter_chord",
           "cp_min", "cp_min_x", "thickness", "thickness_x", "camber", "camber_x", "le_radius",
           "te_angle", "area", "severity", "thwaites_sep_x_upper", "thwaites_sep_x_lower",
           "thwaites_min_lambda", "stratford_margin", "stratford_sep_x_upper",
           "stratford_sep_x_lower", "cp_min_upper", "floor_margin")
_NF = len(FIGURES)


# --- the map -------------------------------------------------------------------------------------


@njit(cache=True)
def _powk(t, k):
    """Principal branch of t^k (real k ≥ 0)."""
    r = abs(t)
    if r == 0.0:
        return 0j
    a = math.atan2(t.imag, t.real)
    m = math.exp(k * math.log(r))
    return complex(m * math.cos(k * a), m * math.sin(k * a))


@njit(cache=True)
def _map_zeta(a, a0, k, zeta):
    """The map at ζ on the unit circle: (g, e, h, z, dz, q2), q2 = ζ z''/z'."""
    inv = zeta.conjugate()
    p = inv
    s = 0j
    h = 0j
    h2 = 0j
    for n in range(a.shape[0]):
        term = a[n] * p
        s += term
        h += (n + 1) * term
        h2 += (n + 1) * (n + 1) * term
        p *= inv
    e = cmath.exp(a0 + s)
    g = zeta * e
    one_m_h = 1.0 - h
    gm1 = g - 1.0
    gp1 = g + 1.0
    r = _powk(gm1 / gp1, k)
    inv_1mr = 1.0 / (1.0 - r)
    z = k * (1.0 + r) * inv_1mr
    inv_g2m1 = 1.0 / (gm1 * gp1)
    dz = 4.0 * k * k * r * inv_1mr * inv_1mr * inv_g2m1 * (e * one_m_h)
    # ζ z''/z' = ζ g' F''/F' + ζ g''/g',  F''/F' = 2 (z − z₁)/(z₁² − 1)
    q2 = 2.0 * (z - g) * g * one_m_h * inv_g2m1 - h + h2 / one_m_h
    return g, e, h, z, dz, q2


@njit(cache=True)
def map_point(a, a0, k, phi):
    """The map at ζ = e^{iφ}: (g, e, h, z, dz, q2)."""
    return _map_zeta(a, a0, k, complex(math.cos(phi), math.sin(phi)))


@njit(cache=True)
def _constants(a):
    """(A₀, L1, L2, L3, Σ|Aₙ|, h(1), L4) of a coefficient vector, L4 = Σ n⁴|Aₙ|."""
    a0 = 0j
    l0 = 0.0
    l1 = 0.0
    l2 = 0.0
    l3 = 0.0
    l4 = 0.0
    h1 = 0j
    for n in range(a.shape[0]):
        m = abs(a[n])
        w = n + 1.0
        a0 -= a[n]
        l0 += m
        l1 += w * m
        l2 += w * w * m
        l3 += w * w * w * m
        l4 += w * w * w * w * m
        h1 += w * a[n]
    return a0, l1, l2, l3, l0, h1, l4


@njit(cache=True)
def _arc_bounds(g, e, h, delta, k, l1, l2, l3, x):
    """Rigorous bounds of the map over the arc |φ − φ_m| ≤ δ from its values at φ_m; ``x`` is
    exp(L1 δ) (the same for every arc of a grid, so computed once by the caller), and l1, l2,
    l3 bound |D S| = |h|, |D h| = |Σ n² Aₙ ζ⁻ⁿ| and |D² h| = |Σ n³ Aₙ ζ⁻ⁿ| on the arc (the
    global L1, L2, L3, or the tighter :func:`_local_bounds`).

    Returns (ok, zmin, kz, dlog, gd): a lower bound of |z'|, bounds of |D² ln z'| and
    |D ln z'|, and a bound of |D g| (the near-circle stays in the disc of radius gd·δ about
    g_m).  ``ok`` is False where the arc is too long for the bounds: split it.
    """
    ae = abs(e)
    omh = abs(1.0 - h)
    m1 = omh - l2 * delta
    if m1 <= 0.0:
        return False, 0.0, _INF, _INF, _INF
    emax = ae * x
    emin = ae / x
    omh_max = omh + l2 * delta
    gd = emax * omh_max  # |D g| = |e||1 − h|
    mg = emax * (omh_max * omh_max + l2)  # |D² g|, D² g = i(D g (1 − h) − g D h)
    gpmin = emin * m1  # |g'|
    rad = gd * delta
    c = g + 1.0
    cc = abs(c)
    if cc <= rad * 1.000001:
        return False, 0.0, _INF, _INF, gd
    # u = 1/(z₁ + 1) maps the disc D(g_m, R) to a disc; t = 1 − 2u
    den = cc * cc - rad * rad
    uc = c.conjugate() / den
    ru = rad / den
    tc = 1.0 - 2.0 * uc
    rt = 2.0 * ru
    atc = abs(tc)
    tmin = atc - rt
    if tmin <= 0.0:
        return False, 0.0, _INF, _INF, gd
    tmax = atc + rt
    auc = abs(uc)
    omt_min = 2.0 * (auc - ru)
    omt_max = 2.0 * (auc + ru)
    # bounds of tmin^{k−1} (amin below it, amin_hi above) and of tmax^{k−1} (amax above it).
    # For 0 ≤ ε = k − 1 ≤ 1 and y = ρ/|t_c| < 1, from |t_c|^ε = |t_c^k|/|t_c| and the
    # concavity of y ↦ (1 ± y)^ε: 1 − y ≤ (1 − y)^ε ≤ 1 − εy and (1 + y)^ε ≤ 1 + εy
    # (no further exponentials; used on short arcs, y ≤ 1e-3, where they are tight to
    # y² and the arcs of a grid and of every split are); otherwise the powers themselves
    tck = _powk(tc, k)
    eps = k - 1.0
    if 0.0 <= eps <= 1.0 and rt <= 1e-3 * atc:
        ace = abs(tck) / atc
        y = rt / atc
        amin = ace * (1.0 - y)
        amin_hi = ace * (1.0 - eps * y)
        amax = ace * (1.0 + eps * y)
    else:
        amin = math.exp(eps * math.log(tmin))
        amin_hi = amin
        amax = math.exp(eps * math.log(tmax))
    tmax_k = amax * tmax
    dist_cut = abs(tc.imag) if tc.real <= 0.0 else atc
    if dist_cut > rt:  # the disc avoids the cut t ≤ 0: t^k is k max|t|^{k−1}-Lipschitz there
        lip = k * amax * rt
        base = abs(1.0 - tck)
        omtk_max = base + lip
        omtk_min = base - lip
    else:
        omtk_max = 1.0 + tmax_k
        omtk_min = 1.0 - tmax_k
    if omtk_min <= 0.0:
        return False, 0.0, _INF, _INF, gd
    fpmin = k * k * amin * omt_min * omt_min / (omtk_max * omtk_max)
    zmin = fpmin * gpmin
    # P = d ln F'/dt = (k−1)/t − 2/(1 − t) + 2k t^{k−1}/(1 − t^k),  T = dt/dz₁ = (1 − t)²/2,
    # Φ = F''/F' = P T,  Φ' = (P' T + P T') T.  The terms of P cancel near the nose, so P and
    # P' are bounded by their exact values at the disc's centre plus ρ times a bound of the
    # next derivative (the triangle inequality only on P'')
    tck1 = tck / tc
    omtc = 1.0 - tc
    omtck = 1.0 - tck
    p_c = (k - 1.0) / tc - 2.0 / omtc + 2.0 * k * tck1 / omtck
    p1_c = (-(k - 1.0) / (tc * tc) - 2.0 / (omtc * omtc) + 2.0 * k * (k - 1.0) * tck1 / tc / omtck
            + 2.0 * k * k * tck1 * tck1 / (omtck * omtck))
    t23 = max(amin_hi * amin_hi / tmin, amax * amax / tmax)  # max |t|^{2k−3} on the disc
    omk3 = omtk_min * omtk_min * omtk_min
    p2max = (2.0 * (k - 1.0) / (tmin * tmin * tmin) + 4.0 / (omt_min * omt_min * omt_min)
             + 2.0 * k * (k - 1.0) * (2.0 - k) * amin_hi / (tmin * tmin) / omtk_min
             + 6.0 * k * k * (k - 1.0) * t23 / (omtk_min * omtk_min)
             + 4.0 * k * k * k * amax * amax * amax / omk3)
    p1max = abs(p1_c) + rt * p2max
    pmax = abs(p_c) + rt * p1max
    tmx = 0.5 * omt_max * omt_max
    phimax = pmax * tmx
    phi1max = (p1max * tmx + pmax * omt_max) * tmx
    # D ln z' = Φ D g + D S − D h/(1 − h)
    dlog = phimax * gd + l1 + l2 / m1
    # D² ln z' = Φ' (D g)² + Φ D² g + D² S − D² h/(1 − h) − (D h)²/(1 − h)²
    kz = phi1max * gd * gd + phimax * mg + l2 + l3 / m1 + l2 * l2 / (m1 * m1)
    return True, zmin, kz, dlog, gd


# --- per-section workspace: the grid samples and their arc bounds ---------------------------------


@njit(cache=True)
def _sample(a, a0, k, zeta, gs, es, hs, zs, dzs, q2s):
    for j in range(zeta.shape[0]):
        g, e, h, z, dz, q2 = _map_zeta(a, a0, k, zeta[j])
        gs[j] = g
        es[j] = e
        hs[j] = h
        zs[j] = z
        dzs[j] = dz
        q2s[j] = q2


@njit(cache=True)
def _local_bounds(a, zeta, h, delta, l1, l2, l3, l4):
    """Bounds of |h|, |Σ n² Aₙ ζ⁻ⁿ| and |Σ n³ Aₙ ζ⁻ⁿ| over the arc |φ − φ_m| ≤ δ: each by its
    value at the centre ζ plus δ times the bound of its derivative (the next of L2, L3, L4),
    and never above the global L1, L2, L3.  Mid-chord, where the series' terms cancel, these
    are several times smaller than the global ones."""
    inv = zeta.conjugate()
    pw = inv
    h2 = 0j
    h3 = 0j
    for n in range(a.shape[0]):
        w = n + 1.0
        term = w * w * a[n] * pw
        h2 += term
        h3 += w * term
        pw *= inv
    return (min(l1, abs(h) + delta * l2), min(l2, abs(h2) + delta * l3),
            min(l3, abs(h3) + delta * l4))


@njit(cache=True)
def _split_arc_bounds(a, zeta, g, e, h, d, k, consts):
    """:func:`_arc_bounds` of the arc of half-width d about ζ (mapped to g, e, h) with its
    :func:`_local_bounds`: what the branch and bounds ask of an arc they split."""
    l1 = consts[0]
    b1, b2, b3 = _local_bounds(a, zeta, h, d, l1, consts[1], consts[2], consts[10])
    return _arc_bounds(g, e, h, d, k, b1, b2, b3, math.exp(l1 * d))


@njit(cache=True)
def _grid_bounds(a, zeta, gs, es, hs, delta, k, l1, l2, l3, l4, oks, zmins, kzs, dlogs, gds):
    x = math.exp(l1 * delta)
    for j in range(gs.shape[0]):
        b1, b2, b3 = _local_bounds(a, zeta[j], hs[j], delta, l1, l2, l3, l4)
        ok, zmin, kz, dlog, gd = _arc_bounds(gs[j], es[j], hs[j], delta, k, b1, b2, b3, x)
        oks[j] = ok
        zmins[j] = zmin
        kzs[j] = kz
        dlogs[j] = dlog
        gds[j] = gd


# --- certified peak speed ------------------------------------------------------------------------


@njit(cache=True)
def _te_speed_bound(b, k, u, ca, l1, l2, gdte, mm, omh1):
    """Upper bound of q on 0 < |φ| ≤ b next to the trailing edge.

    |w| ≤ 2U|φ|(|cos α'| + b/2); |g − 1| ≥ |φ|(|1 − h(1)| − M b/2) and |g + 1| ≤ 2 + b G give
    |t| ≥ |φ| τ_lo; |1 − t| ≥ 2/(2 + bG); |1 − t^k| ≤ 1 + t_max^k; |g'| ≥ e^{−L1 b}(|1 − h(1)|
    − L2 b).  So q ≤ C |φ|^{2−k}, largest at |φ| = b.
    """
    lo = omh1 - 0.5 * mm * b
    gpmin = math.exp(-l1 * b) * (omh1 - l2 * b)
    if lo <= 0.0 or b * gdte >= 2.0 or gpmin <= 0.0:
        return _INF
    taulo = lo / (2.0 + b * gdte)
    tmax = b * gdte / (2.0 - b * gdte)
    num = 2.0 * u * b ** (2.0 - k) * (abs(ca) + 0.5 * b) * (1.0 + tmax**k) ** 2 * (
        2.0 + b * gdte) ** 2
    return num / (4.0 * k * k * taulo ** (k - 1.0) * gpmin)


#: the analytic derivatives the refinements find zeros of
_D_LNQ = 0  # d ln q/dφ (speed maxima; the parameter is α')
_D_LN_DIST_TE = 1  # d ln|z − k|/dφ (the leading edge, farthest from the trailing edge)


@njit(cache=True)
def _deriv(kind, a, a0, k, phi, param):
    """One of the analytic derivatives along the circle, at φ."""
    g, e, h, z, dz, q2 = map_point(a, a0, k, phi)
    if kind == _D_LNQ:
        s = math.sin(phi - param) + math.sin(param)
        return math.cos(phi - param) / s + q2.imag
    zeta = complex(math.cos(phi), math.sin(phi))
    return -(zeta * dz / (z - k)).imag


@njit(cache=True)
def _illinois(kind, a, a0, k, param, lo, hi, flo, fhi):
    """Zero of :func:`_deriv` in [lo, hi], where it changes sign, by the Illinois method
    (modified regula falsi, Dowell & Jarratt 1971) to 1e-13 rad."""
    side = 0
    for _ in range(100):
        if hi - lo <= 1e-13:
            break
        xm = hi - fhi * (hi - lo) / (fhi - flo)
        if not (lo < xm < hi):
            xm = 0.5 * (lo + hi)
        fm = _deriv(kind, a, a0, k, xm, param)
        if fm == 0.0 or not math.isfinite(fm):
            lo = xm
            hi = xm
            break
        if (fm > 0.0) == (flo > 0.0):
            lo = xm
            flo = fm
            if side == -1:
                fhi *= 0.5
            side = -1
        else:
            hi = xm
            fhi = fm
            if side == 1:
                flo *= 0.5
            side = 1
    return 0.5 * (lo + hi)


@njit(cache=True)
def _speed(a, a0, k, u, phi, alpha_c):
    dz = map_point(a, a0, k, phi)[4]
    return 2.0 * u * abs(math.sin(phi - alpha_c) + math.sin(alpha_c)) / abs(dz)


@njit(cache=True)
def _refine_max(a, a0, k, u, alpha_c, lo, hi):
    """Local maximum of q in [lo, hi] where d ln q/dφ goes from + to −, refined to 1e-13 rad.
    Returns (q, φ), or (−1, 0) without such a bracket."""
    f0 = _deriv(_D_LNQ, a, a0, k, lo, alpha_c)
    f1 = _deriv(_D_LNQ, a, a0, k, hi, alpha_c)
    if not (f0 > 0.0 and f1 < 0.0):
        return -1.0, 0.0
    xs = _illinois(_D_LNQ, a, a0, k, alpha_c, lo, hi, f0, f1)
    return _speed(a, a0, k, u, xs, alpha_c), xs


@njit(cache=True)
def _arc_speed_bound(zmin, kz, q2, q, phi, delta, u, alpha_c):
    """Upper bound of q over |φ' − φ| ≤ δ: the smaller of max|w| / min|z'| and a second-order
    bound on ln q = ln|w| − ln|z'| (Taylor with an upper bound of (ln|w|)'' and the bound of
    |(ln|z'|)''|)."""
    sn = math.sin(phi - alpha_c)
    s = sn + math.sin(alpha_c)
    c = math.cos(phi - alpha_c)
    ub = 2.0 * u * (abs(s) + abs(c) * delta + 0.5 * delta * delta) / zmin
    smin = abs(s) - delta
    if smin > 0.0:
        # ln q = ln|s| − ln|z'| + const, so (ln q)'' ≤ sup (ln|s|)'' + K_z.  (ln|s|)'' =
        # (s'' s − s'²)/s² is bounded above on the arc by its value at the centre plus δ times
        # |(ln|s|)'''| ≤ 1/s_min + 3/s_min² + 2/s_min³ (|s'|, |s''|, |s'''| ≤ 1), and by
        # (|s| + δ + 1)/s_min²; near a suction peak it is negative, which tightens the bound
        kw = (abs(s) + delta + 1.0) / (smin * smin)
        g2 = (-sn * s - c * c) / (s * s)
        k3 = (1.0 + (3.0 + 2.0 / smin) / smin) / smin
        m = min(kw, g2 + delta * k3) + kz
        ad = abs(c / s + q2.imag)
        # the largest of d t + m t²/2 over |t| ≤ δ
        if m >= 0.0 or ad >= -m * delta:
            ex = ad * delta + 0.5 * m * delta * delta
        else:
            ex = ad * ad / (-2.0 * m)
        ub2 = q * math.exp(ex)
        if ub2 < ub:
            ub = ub2
    return ub


@njit(cache=True)
def _peak(a, a0, k, consts, phis, gs, es, hs, dzs, q2s, oks, zmins, kzs, alpha_c, tol,
          sc, sd, ste, floor, budget):
    """Certified global maximum of q(φ) = |w|/|z'|: returns (q_max, φ_max, certified).

    Every sampled local maximum within 10 % of the largest sample is refined to round-off; then
    every arc of the circle is shown by rigorous bounds to hold no speed above q_max (1 + tol),
    splitting arcs until it does.  ``certified`` is False only if the budget (arc evaluations)
    or the stack ran out.

    ``floor`` > 0 asks only for the maximum over several flows: arcs are cleared against
    max(q_max, floor) (1 + tol), so that q_max is this flow's maximum where it exceeds the floor
    and a value below it otherwise (the largest speed seen); either way no point of this flow is
    faster than max(q_max, floor) (1 + tol).  A flow whose speeds stay well below the floor is
    cleared at the coarsest arcs.
    """
    l1, l2, gdte, mm, omh1 = consts[0], consts[1], consts[3], consts[4], consts[5]
    p = phis.shape[0]
    step = _TWO_PI / p
    u = math.exp(a0.real)
    ca = math.cos(alpha_c)
    sa = math.sin(alpha_c)
    best = -1.0
    best_phi = 0.0
    qs = np.empty(p)
    ss = np.empty(p)  # |s| = |sin(φ − α') + sin α'| at the samples
    for j in range(p):
        sj = abs(math.sin(phis[j] - alpha_c) + sa)
        ss[j] = sj
        q = 2.0 * u * sj / abs(dzs[j])
        qs[j] = q
        if q > best:
            best = q
            best_phi = phis[j]
    ref = max(best, floor)
    for j in range(p):
        qj = qs[j]
        if qj >= 0.9 * ref and qj >= qs[(j - 1) % p] and qj >= qs[(j + 1) % p]:
            lo = max(phis[j] - step, 1e-12)
            hi = min(phis[j] + step, _TWO_PI - 1e-12)
            qr, pr = _refine_max(a, a0, k, u, alpha_c, lo, hi)
            if qr > best:
                best = qr
                best_phi = pr
    top = 0
    limit = max(best, floor) * (1.0 + tol)
    d0 = 0.5 * step
    wpad = d0 + 0.5 * d0 * d0  # |s| grows by at most |s'| δ + δ²/2 ≤ δ + δ²/2 over an arc
    for j in range(p):
        te = j == 0 or j == p - 1
        if not te and oks[j]:
            # max|w| / min|z'| first (no transcendental); the second-order bound where it fails
            if 2.0 * u * (ss[j] + wpad) / zmins[j] <= limit or _arc_speed_bound(
                    zmins[j], kzs[j], q2s[j], qs[j], phis[j], d0, u, alpha_c) <= limit:
                continue
        sc[top] = phis[j]
        sd[top] = 0.5 * step
        ste[top] = te
        top += 1
    spent = 0
    certified = True
    while top > 0:
        top -= 1
        c = sc[top]
        d = sd[top]
        te = ste[top]
        if te and _te_speed_bound(2.0 * d, k, u, ca, l1, l2, gdte, mm, omh1) <= limit:
            continue
        if spent >= budget or top + 2 >= sc.shape[0] or d < 1e-15:
            certified = False
            continue
        hd = 0.5 * d
        for i in range(2):
            cc = c - hd if i == 0 else c + hd
            spent += 1
            zc = complex(math.cos(cc), math.sin(cc))
            g, e, h, z, dz, q2 = _map_zeta(a, a0, k, zc)
            q = 2.0 * u * abs(math.sin(cc - alpha_c) + sa) / abs(dz)
            if q > best:
                best = q
                best_phi = cc
                limit = max(best, floor) * (1.0 + tol)
            if te and ((i == 0 and c < math.pi) or (i == 1 and c > math.pi)):
                sc[top] = cc
                sd[top] = hd
                ste[top] = True
                top += 1
                continue
            ok, zmin, kz, _, _ = _split_arc_bounds(a, zc, g, e, h, hd, k, consts)
            if ok and _arc_speed_bound(zmin, kz, q2, q, cc, hd, u, alpha_c) <= limit:
                continue
            sc[top] = cc
            sd[top] = hd
            ste[top] = False
            top += 1
    # the best point may be a branch-and-bound sample: refine it to its local maximum
    d = 0.01 * step
    qr, pr = _refine_max(a, a0, k, u, alpha_c, best_phi - d, best_phi + d)
    if qr > best:
        best = qr
        best_phi = pr
    return best, best_phi % _TWO_PI, certified


# --- certified validity --------------------------------------------------------------------------


@njit(cache=True)
def _push_halves(sc, sd, top, c, d):
    """Replace the arc |φ − c| ≤ d on a branch-and-bound stack by its two halves; the new top."""
    sc[top] = c - 0.5 * d
    sd[top] = 0.5 * d
    sc[top + 1] = c + 0.5 * d
    sd[top + 1] = 0.5 * d
    return top + 2


@njit(cache=True)
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


@njit(cache=True)
def _arg_dist(x, ref):
    """Distance of angle x from angle ref, in [0, π]."""
    d = (x - ref) % _TWO_PI
    return _TWO_PI - d if d > math.pi else d


@njit(cache=True)
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
    l1, l2 = consts[0], consts[1]
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


@njit(cache=True)
def _t_box(a, a0, k, l1, l2, c, d):
    """:func:`_t_box_at` for the arc |φ − c| ≤ d."""
    g, e, h, _, _, _ = map_point(a, a0, k, c)
    return _t_box_at(g, e, h, l1, l2, d, math.exp(l1 * d))


@njit(cache=True)
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


@njit(cache=True)
def _te_excess(psi, consts):
    """E(ψ): bound of |arg t − β± − κφ| at distance ψ = |φ| from the trailing edge.

    g − 1 = iφ(1 − h(1))(1 + w), w = φ c₂ + ε, |ε| ≤ M₃ψ²/(6|1 − h(1)|); g + 1 = 2(1 + v),
    v = iφ(1 − h(1))/2 + η, |η| ≤ Mψ²/4, |v| ≤ Gψ/2; |arg(1 + w) − Im w| ≤ |w|²/(2(1 − |w|)).
    """
    gdte, mm, omh1, m3, absc2 = consts[3], consts[4], consts[5], consts[7], consts[9]
    eps = m3 * psi * psi / (6.0 * omh1)
    om = psi * absc2 + eps
    nu = 0.5 * gdte * psi
    if om >= 1.0 or nu >= 1.0:
        return _INF
    return eps + om * om / (2.0 * (1.0 - om)) + 0.25 * mm * psi * psi + nu * nu / (2.0 * (1.0 - nu))


@njit(cache=True)
def _te_box(sigma, psa, psb, consts):
    """Box (|t| low, high, arg t low, high) over the distances [ψa, ψb] from the trailing edge
    on the side σ (+1 upper, −1 lower), from the expansion arg t = β_σ + κφ ± E(ψ) and
    |t| ∈ [ψ(|1 − h(1)| − Mψb/2)/(2 + Gψb), Gψb/(2 − Gψb)]."""
    gdte, mm, omh1, arg1h, kappa = consts[3], consts[4], consts[5], consts[6], consts[8]
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


@njit(cache=True)
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
    l1, l2 = consts[0], consts[1]
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
                f = consts[8] * b + ex
                # args of the two edge arcs differ by π + κ(ψ₁ + ψ₂) ± (E(ψ₁) + E(ψ₂)), and
                # E(ψ) ≤ (ψ/b) E(b) (convex, E(0) = 0): below 2π/k where f(b) < 0 or
                # 2 max(f(b), 0) < 2π/k − π; above it at a cusp (2π/k = π) where κb > E(b)
                if not (f < 0.0 or 2.0 * max(f, 0.0) < slack
                        or (slack <= 0.0 and consts[8] * b - ex > 0.0)):
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


@njit(cache=True)
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
    l1, l2, gdte, mm, omh1, arg1h = (consts[0], consts[1], consts[3], consts[4], consts[5],
                                     consts[6])
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


# --- the chord frame, the flow and the geometry ---------------------------------------------------


@njit(cache=True)
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


@njit(cache=True)
def _interp(xq, xp, fp):
    """np.interp for one query on increasing xp (clamped)."""
    n = xp.shape[0]
    if xq <= xp[0]:
        return fp[0]
    if xq >= xp[n - 1]:
        return fp[n - 1]
    j = np.searchsorted(xp, xq)
    x0 = xp[j - 1]
    x1 = xp[j]
    return fp[j - 1] + (fp[j] - fp[j - 1]) * (xq - x0) / (x1 - x0)


@njit(cache=True)
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


# --- the local-thickness floor and the certified contour ------------------------------------------


@njit(cache=True)
def floor_at(x, t0):
    """The local-thickness floor at chord station x (see FLOOR_START …): t₀ min(1, x/x_n,
    ((1 − x)/(1 − x_t))²)."""
    w = (1.0 - x) / (1.0 - FLOOR_TAPER)
    return t0 * min(1.0, x / FLOOR_NOSE, w * w)


@njit(cache=True)
def floor_stations():
    """The floor's exact stations: FLOOR_STATIONS on [FLOOR_START, FLOOR_END], the floor's
    corners among them (equal steps on the nose ramp, the full floor and the taper, as many per
    piece as its length asks), then FLOOR_TAIL toward the trailing edge, 1 − x falling by
    FLOOR_TAIL_RATIO at each."""
    pieces = np.array([FLOOR_START, FLOOR_NOSE, FLOOR_TAPER, FLOOR_END])
    total = FLOOR_END - FLOOR_START
    out = np.empty(FLOOR_STATIONS + FLOOR_TAIL)
    n = 0
    for i in range(3):
        m = max(2, int(round((FLOOR_STATIONS - 1) * (pieces[i + 1] - pieces[i]) / total)))
        if i == 2:
            m = FLOOR_STATIONS - 1 - n
        for j in range(m):
            out[n] = pieces[i] + (pieces[i + 1] - pieces[i]) * j / m
            n += 1
    out[n] = FLOOR_END
    for j in range(FLOOR_TAIL):
        out[n + 1 + j] = 1.0 - (1.0 - FLOOR_END) * FLOOR_TAIL_RATIO ** (j + 1)
    return out


@njit(cache=True)
def _z_dz(a, a0, k, phi):
    """The map and its derivative at ζ = e^{iφ} (what Newton's method on x(φ) needs)."""
    zeta = complex(math.cos(phi), math.sin(phi))
    inv = zeta.conjugate()
    p = inv
    s = 0j
    h = 0j
    for n in range(a.shape[0]):
        term = a[n] * p
        s += term
        h += (n + 1) * term
        p *= inv
    e = cmath.exp(a0 + s)
    g = zeta * e
    gm1 = g - 1.0
    gp1 = g + 1.0
    r = _powk(gm1 / gp1, k)
    inv_1mr = 1.0 / (1.0 - r)
    z = k * (1.0 + r) * inv_1mr
    dz = 4.0 * k * k * r * inv_1mr * inv_1mr / (gm1 * gp1) * (e * (1.0 - h))
    return zeta, z, dz


@njit(cache=True)
def _point_at_x(a, a0, k, z_le, scale, phi, lo, hi, xt, sign):
    """The exact contour point at chord station xt on the surface arc [lo, hi] of the circle,
    where the chord-frame x is monotone (sign −1: falling with φ, the upper surface; +1:
    rising, the lower one): Newton's method from φ, kept inside a bracket that it narrows (a
    bisection step where Newton would leave it).  Returns (x + iy, φ, converged): converged
    when x matches xt to 1e-14 or the step fell below 1e-15 rad."""
    phi = min(max(phi, lo), hi)
    for _ in range(60):
        zeta, z, dz = _z_dz(a, a0, k, phi)
        zc = (z - z_le) * scale
        f = zc.real - xt
        if abs(f) <= 1e-14:
            return zc, phi, True
        if f * sign > 0.0:
            hi = phi
        else:
            lo = phi
        dxdphi = (1j * zeta * dz * scale).real
        nxt = phi - f / dxdphi
        if not (lo < nxt < hi) or not math.isfinite(nxt):
            nxt = 0.5 * (lo + hi)
        if abs(nxt - phi) <= 1e-15:
            return zc, phi, True
        phi = nxt
    zc = (_z_dz(a, a0, k, phi)[1] - z_le) * scale
    return zc, phi, abs(zc.real - xt) <= 1e-12


@njit(cache=True)
def _start_phi(key, kv, pv, dv, k):
    """The circle angle at a contour key, interpolated between samples: the cubic Hermite
    interpolant from the samples' dφ/dkey where both are finite; next to the trailing edge,
    where 1 − x grows as ψᵏ with the distance ψ from it, the power law through the nearest
    sample; at the leading edge linearly."""
    n = kv.shape[0]
    if key <= kv[0]:
        return pv[0]
    if key >= kv[n - 1]:
        return pv[n - 1]
    j = np.searchsorted(kv, key)
    if j == 1 or j == n - 1:  # between the trailing edge and its nearest sample
        js = 1 if j == 1 else n - 2
        ds = 1.0 - abs(kv[js])
        if ds > 0.0:
            psi = abs(pv[js] - pv[0 if j == 1 else n - 1]) * ((1.0 - abs(key)) / ds) ** (1.0 / k)
            return psi if j == 1 else _TWO_PI - psi
    x0 = kv[j - 1]
    hh = kv[j] - x0
    t = (key - x0) / hh
    d0 = dv[j - 1]
    d1 = dv[j]
    if not (math.isfinite(d0) and math.isfinite(d1)) or hh <= 0.0:
        return pv[j - 1] + (pv[j] - pv[j - 1]) * t
    t2 = t * t
    t3 = t2 * t
    return ((2 * t3 - 3 * t2 + 1) * pv[j - 1] + (t3 - 2 * t2 + t) * hh * d0
            + (-2 * t3 + 3 * t2) * pv[j] + (t3 - t2) * hh * d1)


@njit(cache=True)
def _graph_curvature(a, a0, k, consts, z_le, scale, p0, p1):
    """A bound of |d²y/dx²| of the surface over the circle arc [p0, p1] (single-valued in x):
    |y''| = |Dθ| / (|DZ| cos³θ), with |Dθ| = |Re(1 + ζz''/z')| ≤ |1 + q2_c| + K δ, |DZ| ≥
    |scale| min|z'|, and θ within (|1 + q2_c| + K δ) δ of its centre value.  Inf where the arc
    is too long for the bounds or turns to vertical."""
    c = 0.5 * (p0 + p1)
    d = 0.5 * abs(p1 - p0)
    zc = complex(math.cos(c), math.sin(c))
    g, e, h, z, dz, q2 = _map_zeta(a, a0, k, zc)
    ok, zmin, kz, dlog, gd = _split_arc_bounds(a, zc, g, e, h, d, k, consts)
    if not ok:
        return _INF
    kt = abs(1.0 + q2) + kz * d
    tang = 1j * zc * dz * scale
    theta = math.atan2(tang.imag, tang.real)
    dev = min(_arg_dist(theta, 0.0), _arg_dist(theta, math.pi)) + kt * d
    if dev >= 1.5:  # cos θ not bounded away from 0
        return _INF
    cm = math.cos(dev)
    return kt / (zmin * abs(scale) * cm * cm * cm)


@njit(cache=True)
def _grid_curvature(j, d, dzs, q2s, oks, zmins, kzs, scale_abs, scale_arg):
    """:func:`_graph_curvature` over grid arc j (half-width d) from the grid's own bounds (no
    new map evaluation); ``scale_arg`` is the unit complex number of the frame's rotation."""
    if not oks[j]:
        return _INF
    kt = abs(1.0 + q2s[j]) + kzs[j] * d
    c = (j + 0.5) * 2.0 * d
    tang = 1j * complex(math.cos(c), math.sin(c)) * dzs[j] * scale_arg
    at = abs(tang)
    # cos of the tangent's angle to the chord at the centre, then at most u = K δ further:
    # cos(θ + u) ≥ cos θ (1 − u²/2) − sin θ u (no transcendental function)
    u = kt * d
    cm = abs(tang.real) / at * (1.0 - 0.5 * u * u) - abs(tang.imag) / at * u
    if not cm > 0.07:  # cos θ not bounded away from 0 (θ beyond about 1.5)
        return _INF
    return kt / (zmins[j] * scale_abs * cm * cm * cm)


@njit(cache=True)
def _span_curvature(p0, p1, cbs, dzs, q2s, oks, zmins, kzs, scale_abs, scale_arg):
    """The largest grid-arc curvature bound over the grid arcs that cover [p0, p1] (each
    computed once per section and kept in ``cbs``, NaN until then)."""
    p = cbs.shape[0]
    step = _TWO_PI / p
    lo = min(p0, p1)
    hi = max(p0, p1)
    j0 = max(int(lo / step), 0)
    j1 = min(int(hi / step), p - 1)
    out = 0.0
    for j in range(j0, j1 + 1):
        if math.isnan(cbs[j]):
            cbs[j] = _grid_curvature(j, 0.5 * step, dzs, q2s, oks, zmins, kzs, scale_abs,
                                     scale_arg)
        out = max(out, cbs[j])
    return out


@njit(cache=True)
def _sampled_y(key, kv, yv, pv, cbs, dzs, q2s, oks, zmins, kzs, sabs, sarg):
    """The surface ordinate at a contour key from the samples on either side of it, and a
    bound of the interpolation's error: (y, e, φ low, φ high), with |y_true − y| ≤ e =
    C (key − k₀)(k₁ − key)/2, C the curvature bound of the grid arcs between the two samples
    (:func:`_span_curvature`), and the point's circle angle inside [φ low, φ high]."""
    j = np.searchsorted(kv, key)
    if j < 1 or j >= kv.shape[0]:
        return 0.0, _INF, 0.0, _TWO_PI
    k0 = kv[j - 1]
    k1 = kv[j]
    if not k1 > k0:
        return 0.0, _INF, 0.0, _TWO_PI
    y = yv[j - 1] + (yv[j] - yv[j - 1]) * (key - k0) / (k1 - k0)
    c = _span_curvature(pv[j - 1], pv[j], cbs, dzs, q2s, oks, zmins, kzs, sabs, sarg)
    return y, 0.5 * c * (key - k0) * (k1 - key), pv[j - 1], pv[j]


@njit(cache=True)
def _floor_check(a, a0, k, consts, z_le, scale, kv, yv, pv, dv, phi_le, t0, xst, fs, free,
                 grid, cbs):
    """The local-thickness floor: exact at the stations ``xst``, certified between them.

    At each station the thickness y_u − y_l is first bounded from below by the samples on
    either side (:func:`_sampled_y`); where that bound clears the floor by a tenth of t₀ the
    station passes on it, and elsewhere the thickness is computed at exact contour points:
    below zero is a crossing (V_CROSSED), below the floor V_THIN, so the verdict at every
    station is that of the exact thickness.  Between two stations h apart,
    t ≥ min(t₀, t₁) − C h²/8 with C bounding |t''| (:func:`_span_curvature`, then
    :func:`_graph_curvature`, on each surface's arc between the two stations); where that does
    not show t ≥ FLOOR_BETWEEN × floor the interval is halved at an exact midpoint, whose
    thickness is a witness if it falls below (V_THIN, V_CROSSED).  V_UNCERTIFIED when the
    budget or the stack runs out.  Needs single-valued surfaces (:func:`_validity_fold` first).

    Returns (code, margin): margin = the least (thickness − floor) over the first
    FLOOR_STATIONS stations, chords: exact wherever it is below a tenth of t₀, a lower bound
    above that.  ``free`` receives circle ranges of the two surfaces inside the stretch the
    stations span.
    """
    ns = xst.shape[0]
    cap = fs.shape[1]
    dzs, q2s, oks, zmins, kzs = grid
    sabs = abs(scale)
    sarg = scale / sabs  # the frame's rotation
    cbs[:] = math.nan
    margin = _INF
    top = 0
    ulo_p = uhi_p = llo_p = lhi_p = tp = 0.0
    for i in range(ns):
        x = xst[i]
        fx = floor_at(x, t0)
        yu, eu, ulo, uhi = _sampled_y(-x, kv, yv, pv, cbs, dzs, q2s, oks, zmins, kzs, sabs, sarg)
        yl, el, llo, lhi = _sampled_y(x, kv, yv, pv, cbs, dzs, q2s, oks, zmins, kzs, sabs, sarg)
        t = (yu - eu) - (yl + el)  # a lower bound of the thickness
        # a design station passes on the bound a tenth of t₀ clear (so that the margin figure
        # is exact near the floor), a tail station on any clearance
        if not (t - fx > (0.1 * t0 if i < FLOOR_STATIONS else 0.0) + 1e-12):
            gu = _start_phi(-x, kv, pv, dv, k)
            gl = _start_phi(x, kv, pv, dv, k)
            zu, pu, oku = _point_at_x(a, a0, k, z_le, scale, gu, 1e-12, phi_le, x, -1.0)
            zl, pl, okl = _point_at_x(a, a0, k, z_le, scale, gl, phi_le, _TWO_PI - 1e-12, x,
                                      1.0)
            if not (oku and okl):
                return V_UNCERTIFIED, margin
            t = zu.imag - zl.imag
            if t < 0.0:
                return V_CROSSED, t - fx
            if t < fx:
                return V_THIN, t - fx
            ulo = uhi = pu
            llo = lhi = pl
        if i < FLOOR_STATIONS:
            margin = min(margin, t - fx)
        if i == 0:
            free[1] = ulo  # the upper surface falls in x as φ grows: beyond ulo, x > x₀
            free[2] = lhi
        else:
            fs[0, top] = xst[i - 1]
            fs[1, top] = x
            fs[2, top] = tp
            fs[3, top] = t
            fs[4, top] = ulo
            fs[5, top] = uhi_p
            fs[6, top] = llo_p
            fs[7, top] = lhi
            top += 1
        ulo_p, uhi_p, llo_p, lhi_p, tp = ulo, uhi, llo, lhi, t
    free[0] = uhi_p
    free[3] = llo_p
    spent = 0
    while top > 0:
        top -= 1
        x0, x1, t0_, t1_ = fs[0, top], fs[1, top], fs[2, top], fs[3, top]
        ulo, uhi, llo, lhi = fs[4, top], fs[5, top], fs[6, top], fs[7, top]
        need = FLOOR_BETWEEN * max(floor_at(x0, t0), floor_at(x1, t0))
        hh = x1 - x0
        room = min(t0_, t1_) - need - 1e-12  # what the curvature term may take
        if room > 0.0:
            # the grid arcs' bounds first (no new map evaluation), then the arcs themselves
            cu = _span_curvature(ulo, uhi, cbs, dzs, q2s, oks, zmins, kzs, sabs, sarg)
            cl = _span_curvature(llo, lhi, cbs, dzs, q2s, oks, zmins, kzs, sabs, sarg)
            if (cu + cl) * hh * hh * 0.125 <= room:
                continue
            cu = _graph_curvature(a, a0, k, consts, z_le, scale, ulo, uhi)
            cl = _graph_curvature(a, a0, k, consts, z_le, scale, llo, lhi)
            if (cu + cl) * hh * hh * 0.125 <= room:
                continue
        spent += 1
        if spent > _FLOOR_BUDGET or top + 2 > cap:
            return V_UNCERTIFIED, margin
        xm = 0.5 * (x0 + x1)
        zu, pum, oku = _point_at_x(a, a0, k, z_le, scale, 0.5 * (ulo + uhi), ulo, uhi, xm, -1.0)
        zl, plm, okl = _point_at_x(a, a0, k, z_le, scale, 0.5 * (llo + lhi), llo, lhi, xm, 1.0)
        if not (oku and okl):
            return V_UNCERTIFIED, margin
        tm = zu.imag - zl.imag
        if tm < 0.0:
            return V_CROSSED, margin
        if tm < FLOOR_BETWEEN * floor_at(xm, t0):
            return V_THIN, margin
        # [x0, xm]: upper φ in [φm, uhi], lower in [llo, φm]; [xm, x1]: the rest
        for side in range(2):
            fs[0, top] = x0 if side == 0 else xm
            fs[1, top] = xm if side == 0 else x1
            fs[2, top] = t0_ if side == 0 else tm
            fs[3, top] = tm if side == 0 else t1_
            fs[4, top] = pum if side == 0 else ulo
            fs[5, top] = uhi if side == 0 else pum
            fs[6, top] = llo if side == 0 else plm
            fs[7, top] = plm if side == 0 else lhi
            top += 1
    return V_OK, margin


@njit(cache=True)
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


@njit(cache=True)
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


@njit(cache=True)
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


@njit(cache=True)
def _hermite_peak(x, f, df):
    """Maximum of f from exact values and slopes at three stations: the slope's zero by linear
    interpolation on the sub-interval where it changes sign, the value by the cubic Hermite
    interpolant (error O(δ⁴))."""
    if df[1] < 0.0:
        xa, xb, fa, fb, da, db = x[0], x[1], f[0], f[1], df[0], df[1]
    else:
        xa, xb, fa, fb, da, db = x[1], x[2], f[1], f[2], df[1], df[2]
    hh = xb - xa
    xs = xa - da * hh / (db - da) if db != da else math.nan
    if not (math.isfinite(xs) and xa <= xs <= xb and da >= 0.0 and db <= 0.0):
        return x[1], f[1]
    t = (xs - xa) / hh
    h00 = 2 * t**3 - 3 * t**2 + 1
    h10 = t**3 - 2 * t**2 + t
    h01 = -2 * t**3 + 3 * t**2
    h11 = t**3 - t**2
    return xs, h00 * fa + h10 * hh * da + h01 * fb + h11 * hh * db


@njit(cache=True)
def _cumtrapz_mask(f, s, m0, m1):
    """Cumulative trapezoid of f over s on indices m0..m1 (inclusive), 0 before."""
    out = np.zeros(f.shape[0])
    acc = 0.0
    for i in range(m0 + 1, m1 + 1):
        acc += 0.5 * (f[i] + f[i - 1]) * (s[i] - s[i - 1])
        out[i] = acc
    return out


@njit(cache=True)
def _surface_proxies(s, u, du, x, n_in, n_mask, integral0, s_te, closing_u, do_close, want,
                     reynolds):
    """Proxies along one surface in flow order from the stagnation point.

    ``n_in`` points belong to the surface, the first ``n_mask`` of them are before the end
    station.  Returns (severity, thwaites separation x, min λ, stratford margin, stratford
    separation x, u_end, s_end) as in :mod:`foilmap.section.proxies` (same formulas)."""
    nan = math.nan
    sev = nan
    th_x = nan
    th_min = nan
    st_m = nan
    st_x = nan
    if n_mask < 1:
        return sev, th_x, th_min, st_m, st_x, nan, nan
    last = n_mask - 1
    s_end = s[last]
    u_end = u[last]
    jp = 0
    for i in range(n_mask):
        if u[i] > u[jp]:
            jp = i
    if want & 1:
        worst = -_INF
        for i in range(jp + 1, n_mask):
            m = s[i] / u[i] * du[i]
            if math.isfinite(m) and -m > worst:
                worst = -m
        if do_close:
            m_close = s_end / u_end * (u_end - closing_u) / (s_te - s_end)
            if math.isfinite(m_close) and m_close > worst:
                worst = m_close
        sev = max(worst, 0.0)
    if want & 2:
        # Thwaites: ∫ u⁵ ds exact for u linear between points, plus the stagnation start
        integral = integral0
        lam_prev = nan
        lam_min = _INF
        for i in range(n_mask):
            if i > 0:
                u0 = u[i - 1]
                u1 = u[i]
                poly = (u0**5 + u0**4 * u1 + u0**3 * u1**2 + u0**2 * u1**3 + u0 * u1**4
                        + u1**5)
                integral += poly * (s[i] - s[i - 1]) / 6.0
            lam = 0.45 * integral / u[i] ** 6 * du[i]
            if lam < -0.09:
                frac = 1.0
                if i > 0:
                    frac = (-0.09 - lam_prev) / (lam - lam_prev)
                    if not math.isfinite(frac):
                        frac = 1.0
                    frac = min(max(frac, 0.0), 1.0)
                s_sep = s[i - 1] + frac * (s[i] - s[i - 1]) if i > 0 else s[i]
                th_x = _x_at_s(s, x, n_in, s_sep)
                break
            if lam < lam_min:
                lam_min = lam
            lam_prev = lam
        th_min = lam_min if math.isfinite(lam_min) else nan
    if want & 4:
        st_m, st_x = _stratford(s, u, du, x, n_mask, n_in, jp, reynolds, s_te, closing_u,
                                do_close)
    return sev, th_x, th_min, st_m, st_x, u_end, s_end


@njit(cache=True)
def _x_at_s(s, x, n, sq):
    """Chord station at arc length sq along the first n points of a surface (as
    foilmap.section.evaluation._x_at)."""
    if not math.isfinite(sq):
        return math.nan
    for i in range(n):
        if s[i] >= sq:
            if i == 0:
                return x[0]
            frac = (sq - s[i - 1]) / (s[i] - s[i - 1]) if s[i] > s[i - 1] else 0.0
            return x[i - 1] + frac * (x[i] - x[i - 1])
    return 1.0  # past the last sample: the trailing edge


@njit(cache=True)
def _stratford(s, u, du, x, n, n_in, jp, reynolds, s_te, closing_u, do_close):
    """Stratford's criterion as in :func:`foilmap.section.proxies.stratford`."""
    u_pk = u[jp]
    s_pk = s[jp]
    ratio = np.empty(n)
    for i in range(n):
        ratio[i] = u[i] / u_pk
    cub = ratio**3
    x_int = _cumtrapz_mask(cub, s, 0, n - 1)[jp]
    dcp = np.empty(n)
    for i in range(n):
        dcp[i] = -2.0 * ratio[i] * du[i] / u_pk
    margin = 0.0
    sep_s = math.nan
    beyond_any = False
    prev_lhs = 0.0
    for i in range(jp + 1, n):
        x_eff = x_int + (s[i] - s_pk)
        cpbar = 1.0 - ratio[i] ** 2
        d2 = 0.0
        if 0 < i < n - 1:
            d2 = (dcp[i + 1] - dcp[i - 1]) / (s[i + 1] - s[i - 1])
        elif i == n - 1 and 0 < i < n_in - 1:  # the next point is past the end station: C̄p' = 0
            d2 = (0.0 - dcp[i - 1]) / (s[i + 1] - s[i - 1])
        kk = 0.39 if d2 > 0.0 else 0.35
        beyond = cpbar >= 4.0 / 7.0
        lhs = 0.0
        if (not beyond) and dcp[i] > 0.0 and x_eff > 0.0:
            lhs = cpbar * math.sqrt(x_eff * dcp[i]) * (1e-6 * reynolds * u_pk * x_eff) ** -0.1 / kk
            if not math.isfinite(lhs):
                lhs = 0.0
        if lhs > margin:
            margin = lhs
        if beyond:
            beyond_any = True
        if math.isnan(sep_s) and (lhs >= 1.0 or beyond):
            v1 = 1.0 if beyond else lhs
            frac = (1.0 - prev_lhs) / (v1 - prev_lhs)
            frac = min(max(frac, 0.0), 1.0) if math.isfinite(frac) else 1.0
            sep_s = s[i - 1] + frac * (s[i] - s[i - 1])
        prev_lhs = 1.0 if beyond else lhs
    if beyond_any:
        margin = max(margin, 1.0)
    if do_close:
        s_end = s[n - 1]
        u_end = u[n - 1]
        ds = s_te - s_end
        cp_end = 1.0 - (u_end / u_pk) ** 2
        cp_te = 1.0 - (min(closing_u, u_pk) / u_pk) ** 2
        slope = (cp_te - cp_end) / ds
        x_te = x_int + (s_te - s_pk)
        lhs_te = cp_te * math.sqrt(max(x_te * slope, 0.0)) * (
            1e-6 * reynolds * u_pk * x_te) ** -0.1 / 0.35
        if not (math.isfinite(lhs_te) and ds > 0.0):
            lhs_te = 0.0
        if cp_te >= 4.0 / 7.0:
            lhs_te = max(lhs_te, 1.0)
        if lhs_te >= 1.0 and math.isnan(sep_s):
            sep_s = s_te
        margin = max(margin, lhs_te)
    return margin, _x_at_s(s, x, n_in, sep_s)


# --- one section, all the way --------------------------------------------------------------------


@njit(cache=True)
def _prepare(a, tau, zeta):
    """Grid samples, constants and arc bounds of one section (the shared workspace)."""
    p = zeta.shape[0]
    a0, l1, l2, l3, l0, h1, l4 = _constants(a)
    k = 2.0 - tau / math.pi
    gs = np.empty(p, dtype=np.complex128)
    es = np.empty(p, dtype=np.complex128)
    hs = np.empty(p, dtype=np.complex128)
    zs = np.empty(p, dtype=np.complex128)
    dzs = np.empty(p, dtype=np.complex128)
    q2s = np.empty(p, dtype=np.complex128)
    _sample(a, a0, k, zeta, gs, es, hs, zs, dzs, q2s)
    oks = np.empty(p, dtype=np.bool_)
    zmins = np.empty(p)
    kzs = np.empty(p)
    dlogs = np.empty(p)
    gds = np.empty(p)
    _grid_bounds(a, zeta, gs, es, hs, math.pi / p, k, l1, l2, l3, l4, oks, zmins, kzs, dlogs,
                 gds)
    # global bounds next to the trailing edge: |e| ≤ E = exp(Re A₀ + Σ|Aₙ|), |D g| ≤ E(1 + L1),
    # |D² g| ≤ E((1 + L1)² + L2); e(1) = 1 and h(1) = Σ n Aₙ there
    emax = math.exp(a0.real + l0)
    omh = 1.0 - h1
    gdte = emax * (1.0 + l1)
    mm = emax * ((1.0 + l1) ** 2 + l2)
    # |D³ g| ≤ M(1 + L1) + 2 G L2 + E L3 (D³ g = i(D² g (1 − h) − 2 D g D h − g D² h)); at the
    # edge D² g(0) = −((1 − h(1))² + Σ n² Aₙ), and arg t = β± + κ φ + O(φ²) with
    # κ = Im c₂ − Re(1 − h(1))/2, c₂ = D² g(0)/(2i(1 − h(1)))
    m3 = mm * (1.0 + l1) + 2.0 * gdte * l2 + emax * l3
    h21 = 0j
    for n in range(a.shape[0]):
        h21 += (n + 1.0) * (n + 1.0) * a[n]
    c2 = -(omh * omh + h21) / (2j * omh)
    consts = (l1, l2, l3, gdte, mm, abs(omh), math.atan2(omh.imag, omh.real), m3,
              c2.imag - 0.5 * omh.real, abs(c2), l4)
    return a0, k, consts, gs, es, hs, zs, dzs, q2s, oks, zmins, kzs, dlogs, gds


@njit(cache=True)
def _workspace(p):
    """Scratch arrays for the branch-and-bound stacks and the stage-2 arc boxes, allocated once
    per batch: (sc, sd, ste, ws, wb, wi)."""
    cap = 4 * p + 4096
    return (np.empty(_STACK), np.empty(_STACK), np.zeros(_STACK, dtype=np.bool_),
            np.empty((6, cap)), np.zeros((2, cap), dtype=np.bool_),
            np.empty((2, cap), dtype=np.int64))


@njit(cache=True)
def _grid_phi(p):
    return (np.arange(p) + 0.5) * (_TWO_PI / p)


@njit(cache=True)
def _stations(m):
    """m cosine-spaced chord stations inside (0, 1) (the crossing witness, thickness, camber)."""
    xs = np.empty(m)
    for i in range(m):
        xs[i] = 0.5 * (1.0 - math.cos(math.pi * (i + 1) / (m + 1)))
    return xs


#: chord stations where the sampled thickness and camber are read (and a crossing looked for)
_M_ST = 65


@njit(cache=True)
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


@njit(cache=True)
def critical_batch(coeffs, radius):
    """:func:`_schur_cohn` for each row, shape (B,) bool."""
    out = np.empty(coeffs.shape[0], dtype=np.bool_)
    for i in range(coeffs.shape[0]):
        out[i] = _schur_cohn(coeffs[i], radius)
    return out


@njit(cache=True)
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


@njit(cache=True)
def peak_batch(coeffs, tau, alpha_c, points, tol, budget=_BUDGET):
    """Certified peak speed of each section at circle-plane angle α': (q_max, φ_max,
    certified), shapes (B,); NaN where α' is not finite."""
    nb = coeffs.shape[0]
    phis = _grid_phi(points)
    zeta = np.exp(1j * phis)
    q = np.full(nb, np.nan)
    phi = np.full(nb, np.nan)
    cert = np.zeros(nb, dtype=np.bool_)
    sc = np.empty(_STACK)
    sd = np.empty(_STACK)
    ste = np.zeros(_STACK, dtype=np.bool_)
    for i in range(nb):
        if not math.isfinite(alpha_c[i]):
            continue
        a = coeffs[i]
        a0, k, consts, gs, es, hs, zs, dzs, q2s, oks, zmins, kzs, dlogs, gds = _prepare(
            a, tau[i], zeta)
        q[i], phi[i], cert[i] = _peak(a, a0, k, consts, phis, gs, es, hs, dzs, q2s, oks, zmins,
                                      kzs, alpha_c[i], tol, sc, sd, ste, 0.0, budget)
    return q, phi, cert


@njit(cache=True)
def search_batch(coeffs, tau, cls, points, crit_radius, margin, proxy_end, stations, want,
                 reynolds, tol, design_peak=True, floor=0.0, budget=_BUDGET):
    """Everything a search needs of a batch, one section at a time.

    Parameters
    ----------
    coeffs : complex (B, N); tau : (B,) radians; cls : (K,) lift coefficients, the design Cl
    first; points : circle samples; crit_radius, margin : 1 − δ₁ and δ₂; proxy_end : chord
    station where the proxies stop; stations : (M,) chord stations of exact thickness; want :
    bit flags of the proxies (1 severity, 2 Thwaites, 4 Stratford); reynolds : for Stratford;
    tol : relative tolerance of the certified peak; design_peak : whether the figures give the
    peak suction at the design Cl itself (``cp_min``, ``cp_min_x``, ``cp_min_upper``).  A
    search needs only the largest peak over its Cls: without ``design_peak`` the ends of the
    range are certified first and the design Cl, inside it, is only cleared against them (those
    three figures are then NaN).  floor : the local-thickness floor t₀ in chords (0: none;
    :func:`_floor_check`), whose margin is the figure ``floor_margin``.  A section whose
    certificate of the peak gives up (``budget`` arc evaluations per Cl, or the stack) gets
    V_UNCERTIFIED, never figures.

    Returns
    -------
    status (B,) int8, figures (B, len(FIGURES)) at the design Cl (radians), the largest peak
    suction over the Cls (B,), thickness at the stations (B, M).
    """
    nb = coeffs.shape[0]
    ncl = cls.shape[0]
    phis = _grid_phi(points)
    zeta = np.exp(1j * phis)
    p = points
    step = _TWO_PI / p
    status = np.zeros(nb, dtype=np.int8)
    fig = np.full((nb, _NF), np.nan)
    peaks = np.full(nb, np.nan)
    thick = np.full((nb, stations.shape[0]), np.nan)
    sc, sd, ste, ws, wb, wi = _workspace(points)
    m_st = _M_ST
    xs = _stations(m_st)
    xst = floor_stations()
    fs = np.empty((8, _STACK))
    cbs = np.empty(p)
    keys = np.empty(p + 3)
    yk = np.empty(p + 3)
    pk = np.empty(p + 3)
    for b in range(nb):
        a = coeffs[b]
        t_b = tau[b]
        if not (np.all(np.isfinite(a.real)) and np.all(np.isfinite(a.imag))
                and math.isfinite(t_b)):
            status[b] = V_NON_FINITE
            continue
        if not _schur_cohn(a, crit_radius):
            status[b] = V_CRITICAL
            continue
        a0, k, consts, gs, es, hs, zs, dzs, q2s, oks, zmins, kzs, dlogs, gds = _prepare(
            a, t_b, zeta)
        code, phi_le, z_le, fmargin, nk = _certify(
            a, a0, k, consts, phis, gs, es, hs, zs, dzs, q2s, oks, zmins, kzs, dlogs, gds,
            margin, floor, xst, xs, keys, yk, pk, fs, cbs, sc, sd, ste, ws, wb, wi)
        if code != V_OK:
            status[b] = code
            continue
        te_m_le = k - z_le
        chord = abs(te_m_le)
        gamma = math.atan2(te_m_le.imag, te_m_le.real)
        scale = 1.0 / te_m_le
        u = math.exp(a0.real)
        clmax = 8.0 * math.pi * u / chord
        reach = True
        for c in range(ncl):
            if not abs(cls[c] / clmax) <= 1.0:
                reach = False
        if not reach:
            status[b] = V_ABOVE_MAX_LIFT
            continue
        # flow at the design Cl: α' = asin(Cl c/(8πU)), α = α' − γ + Im A₀
        alpha_c = math.asin(cls[0] / clmax)
        alpha = alpha_c - gamma + a0.imag
        circ = 4.0 * math.pi * u * math.sin(alpha_c)
        # the peak suction at the design Cl, then the largest over every Cl (certified): the
        # other Cls are cleared against the largest speed found so far (without design_peak
        # the design Cl comes last, cleared against the ends of the range)
        phi_pk = 0.0
        q_pk = math.nan
        q_all = 0.0
        certified = True
        for i in range(ncl):
            c = i if (design_peak or ncl == 1) else (i + 1) % ncl
            ac = math.asin(cls[c] / clmax)
            qm, pm, cert = _peak(a, a0, k, consts, phis, gs, es, hs, dzs, q2s, oks, zmins, kzs,
                                 ac, tol, sc, sd, ste, q_all, budget)
            if not cert:
                certified = False
                break
            if c == 0 and i == 0:
                q_pk = qm
                phi_pk = pm
            if not math.isfinite(qm):
                q_all = math.nan
                break
            q_all = max(q_all, qm)
        if not certified:
            status[b] = V_UNCERTIFIED
            continue
        peaks[b] = q_all * q_all - 1.0
        z_pk = complex(math.nan, 0.0)  # the design Cl's own peak, where it was asked for
        if not math.isnan(q_pk):
            z_pk = (map_point(a, a0, k, phi_pk)[3] - z_le) * scale
        # Cm c/4 from three Laurent coefficients (Blasius; see foilmap.section.flow)
        a1 = a[0]
        a2 = a[1] if a.shape[0] > 1 else 0j
        ee = cmath.exp(a0)
        am1 = ee * (a2 + 0.5 * a1 * a1) + (k * k - 1.0) / (3.0 * ee)
        w0 = u * cmath.exp(-1j * alpha_c)
        w1 = 1j * circ / (2.0 * math.pi)
        m0 = 2.0 * math.pi * (w0 * w0 * am1 / ee + a1 * w0 * w1).imag
        force = 1j * circ * cmath.exp(1j * (alpha + gamma))
        z_q = z_le + 0.25 / scale
        cm = -2.0 * (m0 - (z_q.conjugate() * force).imag) / (chord * chord)
        # geometry: the contour laid along the key −x (upper), +x (lower) (by _certify)
        kv = keys[:nk]
        yv = yk[:nk]
        pv = pk[:nk]
        jt = 0
        jc = 0
        tmax = -_INF
        cmax = -1.0
        tt = np.empty(m_st)
        cam = np.empty(m_st)
        for i in range(m_st):
            yu = _interp(-xs[i], kv, yv)
            yl = _interp(xs[i], kv, yv)
            tt[i] = yu - yl
            cam[i] = 0.5 * (yu + yl)
            if tt[i] > tmax:
                tmax = tt[i]
                jt = i
            if abs(cam[i]) > cmax:
                cmax = abs(cam[i])
                jc = i
        sign = 1.0 if cam[jc] >= 0.0 else -1.0
        if cam[jc] == 0.0:
            sign = 1.0
        jt = min(max(jt, 1), m_st - 2)
        jc = min(max(jc, 1), m_st - 2)
        x3 = np.empty(3)
        ft = np.empty(3)
        dt = np.empty(3)
        fc = np.empty(3)
        dc = np.empty(3)
        for r in range(3):
            x3[r] = xs[jt - 1 + r]
            zu, su, _ = _exact_point(a, a0, k, z_le, scale, kv, yv, pv, -x3[r], 2)
            zl, sl, _ = _exact_point(a, a0, k, z_le, scale, kv, yv, pv, x3[r], 2)
            ft[r] = zu.imag - zl.imag
            dt[r] = su - sl
        t_x, t_max = _hermite_peak(x3, ft, dt)
        for r in range(3):
            x3[r] = xs[jc - 1 + r]
            zu, su, _ = _exact_point(a, a0, k, z_le, scale, kv, yv, pv, -x3[r], 2)
            zl, sl, _ = _exact_point(a, a0, k, z_le, scale, kv, yv, pv, x3[r], 2)
            fc[r] = sign * 0.5 * (zu.imag + zl.imag)
            dc[r] = sign * 0.5 * (su + sl)
        c_x, c_abs = _hermite_peak(x3, fc, dc)
        for r in range(stations.shape[0]):
            zu, _, _ = _exact_point(a, a0, k, z_le, scale, kv, yv, pv, -stations[r], 4)
            zl, _, _ = _exact_point(a, a0, k, z_le, scale, kv, yv, pv, stations[r], 4)
            thick[b, r] = zu.imag - zl.imag
        g_le, e_le, h_le, z_l, dz_le, q2_le = map_point(a, a0, k, phi_le)
        le_radius = abs(dz_le) / (1.0 + q2_le).real / chord
        area = 0.0
        for j in range(p):
            zc = (zs[j] - z_le) * scale
            dzc = 1j * zeta[j] * dzs[j] * scale
            area += zc.real * dzc.imag - zc.imag * dzc.real
        area *= 0.5 * step
        # proxies along both surfaces from the stagnation point
        sev = math.nan
        th_up = math.nan
        th_lo = math.nan
        th_min = math.nan
        st_m = math.nan
        st_up = math.nan
        st_lo = math.nan
        if want:
            sev, th_up, th_lo, th_min, st_m, st_up, st_lo = _proxies(
                phis, zs, dzs, q2s, z_le, scale, chord, u, alpha_c, proxy_end, want, reynolds)
        f = fig[b]
        f[0] = 2.0 * circ / chord
        f[1] = alpha
        f[2] = a0.imag - gamma
        f[3] = 8.0 * math.pi * u * math.cos(alpha_c) / chord
        f[4] = clmax
        f[5] = cm
        f[6] = 1.0 - q_pk * q_pk
        f[7] = z_pk.real
        f[8] = t_max
        f[9] = t_x
        f[10] = sign * c_abs
        f[11] = c_x
        f[12] = le_radius
        f[13] = t_b
        f[14] = area
        f[15] = sev
        f[16] = th_up
        f[17] = th_lo
        f[18] = th_min
        f[19] = st_m
        f[20] = st_up
        f[21] = st_lo
        f[22] = math.nan if math.isnan(q_pk) else (1.0 if phi_pk < phi_le else 0.0)
        f[23] = fmargin
        if not (math.isfinite(f[0]) and math.isfinite(f[1]) and math.isfinite(f[5])
                and math.isfinite(peaks[b]) and math.isfinite(f[8]) and math.isfinite(f[12])):
            status[b] = V_NON_FINITE
    for b in range(nb):
        if status[b] != V_OK:
            fig[b, :] = np.nan
            peaks[b] = np.nan
            thick[b, :] = np.nan
    return status, fig, peaks, thick


@njit(cache=True)
def _proxies(phis, zs, dzs, q2s, z_le, scale, chord, u, alpha_c, proxy_end, want, reynolds):
    """The recovery proxies at the design Cl, as :func:`foilmap.section.evaluation.analyse` computes
    them (surfaces from the stagnation point on the grid, the same formulas)."""
    p = phis.shape[0]
    h = _TWO_PI / p
    sa = math.sin(alpha_c)
    q = np.empty(p)
    ds = np.empty(p)
    grad = np.empty(p)
    x = np.empty(p)
    arc = np.empty(p)
    acc = 0.0
    for j in range(p):
        ds[j] = abs(dzs[j]) / chord
        s_ = math.sin(phis[j] - alpha_c) + sa
        q[j] = 2.0 * u * abs(s_) / abs(dzs[j])
        grad[j] = q[j] * (math.cos(phis[j] - alpha_c) / s_ + q2s[j].imag) / ds[j]
        x[j] = ((zs[j] - z_le) * scale).real
        acc += ds[j]
        arc[j] = h * (acc - 0.5 * ds[j] - 0.5 * ds[0])
    phi_s = (math.pi + 2.0 * alpha_c) % _TWO_PI
    pos = phi_s / h - 0.5
    j0 = min(max(int(math.floor(pos)), 0), p - 2)
    frac = min(max(pos - j0, 0.0), 1.0)
    arc_s = arc[j0] + frac * (arc[j0 + 1] - arc[j0])
    arc_total = arc[p - 1] + 0.5 * h * ds[p - 1]
    j_first = min(max(j0 + (1 if frac > 0.0 else 0), 0), p - 1)
    if not phis[j_first] > phi_s:
        j_first = min(j_first + 1, p - 1)
    # the lower surface: φ > φ_s in grid order; the upper: φ ≤ φ_s in reverse
    n_lo = 0
    for j in range(p):
        if phis[j] > phi_s:
            n_lo += 1
    n_up = p - n_lo
    su = np.empty(n_up)
    uu = np.empty(n_up)
    du_ = np.empty(n_up)
    xu = np.empty(n_up)
    sl = np.empty(n_lo)
    ul = np.empty(n_lo)
    dl = np.empty(n_lo)
    xl = np.empty(n_lo)
    iu = 0
    for j in range(p - 1, -1, -1):
        if not phis[j] > phi_s:
            su[iu] = arc_s - arc[j]
            uu[iu] = q[j]
            du_[iu] = -grad[j]
            xu[iu] = x[j]
            iu += 1
    il = 0
    for j in range(p):
        if phis[j] > phi_s:
            sl[il] = arc[j] - arc_s
            ul[il] = q[j]
            dl[il] = grad[j]
            xl[il] = x[j]
            il += 1
    jf_u = min(max(j_first - 1, 0), p - 1)
    int0_u = q[jf_u] ** 5 * abs(arc[jf_u] - arc_s) / 6.0
    int0_l = q[j_first] ** 5 * abs(arc[j_first] - arc_s) / 6.0
    m_up = n_up
    for i in range(n_up):
        if xu[i] > proxy_end:
            m_up = i
            break
    m_lo = n_lo
    for i in range(n_lo):
        if xl[i] > proxy_end:
            m_lo = i
            break
    do_close = proxy_end < 0.999
    u_te = 0.95
    if m_up > 0:
        u_te = min(u_te, uu[m_up - 1])
    if m_lo > 0:
        u_te = min(u_te, ul[m_lo - 1])
    r_u = _surface_proxies(su, uu, du_, xu, n_up, m_up, int0_u, arc_s, u_te, do_close, want,
                           reynolds)
    r_l = _surface_proxies(sl, ul, dl, xl, n_lo, m_lo, int0_l, arc_total - arc_s, u_te,
                           do_close, want, reynolds)
    sev = max(r_u[0], r_l[0]) if (math.isfinite(r_u[0]) and math.isfinite(r_l[0])) else (
        r_u[0] if math.isfinite(r_u[0]) else r_l[0])
    th_min = min(r_u[2], r_l[2]) if (math.isfinite(r_u[2]) and math.isfinite(r_l[2])) else (
        r_u[2] if math.isfinite(r_u[2]) else r_l[2])
    st_m = max(r_u[3], r_l[3]) if (math.isfinite(r_u[3]) and math.isfinite(r_l[3])) else (
        r_u[3] if math.isfinite(r_u[3]) else r_l[3])
    return sev, r_u[1], r_l[1], th_min, st_m, r_u[4], r_l[4]


def warm_up() -> None:
    """Compile (or load from numba's cache) every entry point once, on a one-section batch.

    The driver calls this before it starts worker processes, so that they load the compiled
    code from the cache instead of each compiling it (about half a minute the first time after
    an install).
    """
    a = np.array([[-0.08 + 0.04j, 0.004 - 0.003j]])
    tau = np.array([0.17])
    validity_batch(a, tau, 64, 0.95, 0.02, 0.005)
    peak_batch(a, tau, np.array([0.05]), 64, PEAK_TOLERANCE)
    critical_batch(a, 0.95)
    for design_peak in (True, False):  # the forms commands and searches call
        search_batch(a, tau, np.array([0.5]), 64, 0.95, 0.02, 0.9, np.zeros(0), 0, 0.0,
                     PEAK_TOLERANCE, design_peak, 0.005)
