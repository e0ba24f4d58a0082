"""The certified peak speed (compiled): the largest q = |w|/|z'| on the whole contour, every
arc of the circle shown by the bounds of :mod:`._kbounds` to hold no faster point.
"""

from __future__ import annotations

import math

import numpy as np

from foilmap.section._kcache import kernel
from foilmap.section._kconst import (
    _BUDGET, C_GDTE, C_L1, C_L2, C_MM, C_OMH1, _INF, _STACK, _TWO_PI,
)
from foilmap.section._kmap import (
    _D_LNQ, _deriv, _dlnq, _grid_phi, _illinois, _map_zeta, _speed,
)
from foilmap.section._kbounds import _prepare, _split_arc_bounds


@kernel
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


@kernel
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
        ad = abs(_dlnq(phi, alpha_c, q2))
        # the largest of d t + m t²/2 over |t| ≤ δ
        if m >= 0.0 or ad >= -m * delta:
            ex = ad * delta + 0.5 * m * delta * delta
        else:
            ex = ad * ad / (-2.0 * m)
        ub2 = q * math.exp(ex)
        if ub2 < ub:
            ub = ub2
    return ub


@kernel
def _refine_max(a, a0, k, u, alpha_c, lo, hi):
    """Local maximum of q in [lo, hi] where d ln q/dφ goes from + to −, refined to 1e-13 rad.
    Returns (q, φ), or (−1, 0) without such a bracket."""
    f0 = _deriv(_D_LNQ, a, a0, k, lo, alpha_c)
    f1 = _deriv(_D_LNQ, a, a0, k, hi, alpha_c)
    if not (f0 > 0.0 and f1 < 0.0):
        return -1.0, 0.0
    xs = _illinois(_D_LNQ, a, a0, k, alpha_c, lo, hi, f0, f1)
    return _speed(a, a0, k, u, xs, alpha_c), xs


@kernel
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
    l1, l2, gdte = consts[C_L1], consts[C_L2], consts[C_GDTE]
    mm, omh1 = consts[C_MM], consts[C_OMH1]
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


@kernel
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
