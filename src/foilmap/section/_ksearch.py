"""The search kernel (compiled): everything a search needs of a batch of sections, one section
at a time, in one pass (validity, flow, certified peak, moment, geometry, proxies).
"""

from __future__ import annotations

import cmath
import math

import numpy as np

from foilmap.section._kcache import kernel
from foilmap.section._kconst import (
    _BUDGET, F_ALPHA, F_ALPHA_ZERO_LIFT, F_AREA, F_CAMBER, F_CAMBER_X, F_CL, F_CL_MAX_IDEAL,
    F_CM_QUARTER_CHORD, F_CP_MIN, F_CP_MIN_UPPER, F_CP_MIN_X, F_FLOOR_MARGIN, F_LE_RADIUS,
    F_LIFT_SLOPE, F_SEVERITY, F_STRATFORD_MARGIN, F_STRATFORD_SEP_X_LOWER, F_STRATFORD_SEP_X_UPPER,
    F_TE_ANGLE, F_THICKNESS, F_THICKNESS_X, F_THWAITES_MIN_LAMBDA, F_THWAITES_SEP_X_LOWER,
    F_THWAITES_SEP_X_UPPER, _INF, _M_ST, _NF, _STACK, _TWO_PI, V_ABOVE_MAX_LIFT, V_CRITICAL,
    V_NON_FINITE, V_OK, V_UNCERTIFIED,
)
from foilmap.section._kmap import _grid_phi, _interp, map_point, _stations
from foilmap.section._kbounds import _prepare, _workspace
from foilmap.section._kpeak import _peak
from foilmap.section._kfloor import floor_stations
from foilmap.section._kvalid import _certify, _exact_point, _schur_cohn
from foilmap.section._kproxies import _proxies


@kernel
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


@kernel
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
        f[F_CL] = 2.0 * circ / chord
        f[F_ALPHA] = alpha
        f[F_ALPHA_ZERO_LIFT] = a0.imag - gamma
        f[F_LIFT_SLOPE] = 8.0 * math.pi * u * math.cos(alpha_c) / chord
        f[F_CL_MAX_IDEAL] = clmax
        f[F_CM_QUARTER_CHORD] = cm
        f[F_CP_MIN] = 1.0 - q_pk * q_pk
        f[F_CP_MIN_X] = z_pk.real
        f[F_THICKNESS] = t_max
        f[F_THICKNESS_X] = t_x
        f[F_CAMBER] = sign * c_abs
        f[F_CAMBER_X] = c_x
        f[F_LE_RADIUS] = le_radius
        f[F_TE_ANGLE] = t_b
        f[F_AREA] = area
        f[F_SEVERITY] = sev
        f[F_THWAITES_SEP_X_UPPER] = th_up
        f[F_THWAITES_SEP_X_LOWER] = th_lo
        f[F_THWAITES_MIN_LAMBDA] = th_min
        f[F_STRATFORD_MARGIN] = st_m
        f[F_STRATFORD_SEP_X_UPPER] = st_up
        f[F_STRATFORD_SEP_X_LOWER] = st_lo
        f[F_CP_MIN_UPPER] = math.nan if math.isnan(q_pk) else (
            1.0 if phi_pk < phi_le else 0.0)
        f[F_FLOOR_MARGIN] = fmargin
        if not (math.isfinite(f[F_CL]) and math.isfinite(f[F_ALPHA])
                and math.isfinite(f[F_CM_QUARTER_CHORD]) and math.isfinite(peaks[b])
                and math.isfinite(f[F_THICKNESS]) and math.isfinite(f[F_LE_RADIUS])):
            status[b] = V_NON_FINITE
    for b in range(nb):
        if status[b] != V_OK:
            fig[b, :] = np.nan
            peaks[b] = np.nan
            thick[b, :] = np.nan
    return status, fig, peaks, thick
