"""The local-thickness floor (compiled): its shape and stations, exact contour points at a
chord station, and the certificate that the floor holds between the stations.
"""

from __future__ import annotations

import math

import numpy as np

from foilmap.section._kcache import kernel
from foilmap.section._kconst import (
    FLOOR_BETWEEN, _FLOOR_BUDGET, FLOOR_END, FLOOR_NOSE, FLOOR_START, FLOOR_STATIONS, FLOOR_TAIL,
    FLOOR_TAIL_RATIO, FLOOR_TAPER, _INF, _TWO_PI, V_CROSSED, V_OK, V_THIN, V_UNCERTIFIED,
)
from foilmap.section._kmap import _arg_dist, _map_zeta, _z_dz
from foilmap.section._kbounds import _split_arc_bounds


@kernel
def floor_at(x, t0):
    """The local-thickness floor at chord station x (see FLOOR_START …): t₀ min(1, x/x_n,
    ((1 − x)/(1 − x_t))²)."""
    w = (1.0 - x) / (1.0 - FLOOR_TAPER)
    return t0 * min(1.0, x / FLOOR_NOSE, w * w)


@kernel
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


@kernel
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


@kernel
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


@kernel
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


@kernel
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


@kernel
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


@kernel
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


@kernel
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
