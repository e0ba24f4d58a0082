"""The recovery proxies at the design Cl (compiled), as the numpy reference
(:mod:`foilmap.section.proxies`, :func:`foilmap.section.evaluation.analyse`) computes them.
"""

from __future__ import annotations

import math

import numpy as np

from foilmap.section._kcache import kernel
from foilmap.section._kconst import (
    _INF, PROXY_CLOSE_LIMIT, TRAILING_EDGE_SPEED, _TWO_PI, WANT_SEVERITY, WANT_STRATFORD,
    WANT_THWAITES,
)
from foilmap.section._kmap import _dlnq


@kernel
def _cumtrapz_mask(f, s, m0, m1):
    """Cumulative trapezoid of f over s on indices m0..m1 (inclusive), 0 before."""
    out = np.zeros(f.shape[0])
    acc = 0.0
    for i in range(m0 + 1, m1 + 1):
        acc += 0.5 * (f[i] + f[i - 1]) * (s[i] - s[i - 1])
        out[i] = acc
    return out


@kernel
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
    if want & WANT_SEVERITY:
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
    if want & WANT_THWAITES:
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
    if want & WANT_STRATFORD:
        st_m, st_x = _stratford(s, u, du, x, n_mask, n_in, jp, reynolds, s_te, closing_u,
                                do_close)
    return sev, th_x, th_min, st_m, st_x, u_end, s_end


@kernel
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


@kernel
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


@kernel
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
        grad[j] = q[j] * _dlnq(phis[j], alpha_c, q2s[j]) / ds[j]
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
    do_close = proxy_end < PROXY_CLOSE_LIMIT
    u_te = TRAILING_EDGE_SPEED
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
