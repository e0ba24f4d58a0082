"""Rigorous bounds of the map over arcs of the circle (compiled), and the per-section workspace
every certificate shares: the grid samples, their arc bounds and the section's constants.

The bounds are derived in docs/method.md ("What is exact between samples").
"""

from __future__ import annotations

import math

import numpy as np

from foilmap.section._kcache import kernel
from foilmap.section._kconst import C_L1, C_L2, C_L3, C_L4, _INF, _STACK
from foilmap.section._kmap import _constants, _local_bounds, _powk, _sample


@kernel
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


@kernel
def _split_arc_bounds(a, zeta, g, e, h, d, k, consts):
    """:func:`_arc_bounds` of the arc of half-width d about ζ (mapped to g, e, h) with its
    :func:`_local_bounds`: what the branch and bounds ask of an arc they split."""
    l1 = consts[C_L1]
    b1, b2, b3 = _local_bounds(a, zeta, h, d, l1, consts[C_L2], consts[C_L3], consts[C_L4])
    return _arc_bounds(g, e, h, d, k, b1, b2, b3, math.exp(l1 * d))


@kernel
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


@kernel
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
    # by position: the C_* indices of foilmap.section._kconst
    consts = (l1, l2, l3, gdte, mm, abs(omh), math.atan2(omh.imag, omh.real), m3,
              c2.imag - 0.5 * omh.real, abs(c2), l4)
    return a0, k, consts, gs, es, hs, zs, dzs, q2s, oks, zmins, kzs, dlogs, gds


@kernel
def _workspace(p):
    """Scratch arrays for the branch-and-bound stacks and the stage-2 arc boxes, allocated once
    per batch: (sc, sd, ste, ws, wb, wi)."""
    cap = 4 * p + 4096
    return (np.empty(_STACK), np.empty(_STACK), np.zeros(_STACK, dtype=np.bool_),
            np.empty((6, cap)), np.zeros((2, cap), dtype=np.bool_),
            np.empty((2, cap), dtype=np.int64))
