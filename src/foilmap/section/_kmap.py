"""The map at a point of the circle (compiled): the two stages and their derivatives, the
constants of a coefficient vector, the analytic derivatives along the circle and their zeros.

Notation on ζ = e^{iφ} (D = d/dφ): S = Σ Aₙ ζ⁻ⁿ, h = Σ n Aₙ ζ⁻ⁿ, e = g/ζ = exp(A₀ + S), so that
g' = e (1 − h) and D g = iζ g'.  With t = (z₁ − 1)/(z₁ + 1) the Kármán–Trefftz stage has
F'(z₁) = dz/dz₁ = k² t^{k−1} (1 − t)² / (1 − t^k)² (principal powers).  Exact constants of a
section: L1 = Σ n|Aₙ| ≥ |D S|, |h|;  L2 = Σ n²|Aₙ| ≥ |D h|, |D² S|;  L3 = Σ n³|Aₙ| ≥ |D² h|.
"""

from __future__ import annotations

import cmath
import math

import numpy as np

from foilmap.section._kcache import kernel
from foilmap.section._kconst import _TWO_PI


@kernel
def _powk(t, k):
    """Principal branch of t^k (real k ≥ 0)."""
    r = abs(t)
    if r == 0.0:
        return 0j
    a = math.atan2(t.imag, t.real)
    m = math.exp(k * math.log(r))
    return complex(m * math.cos(k * a), m * math.sin(k * a))


@kernel
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


@kernel
def map_point(a, a0, k, phi):
    """The map at ζ = e^{iφ}: (g, e, h, z, dz, q2)."""
    return _map_zeta(a, a0, k, complex(math.cos(phi), math.sin(phi)))


@kernel
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


@kernel
def _sample(a, a0, k, zeta, gs, es, hs, zs, dzs, q2s):
    for j in range(zeta.shape[0]):
        g, e, h, z, dz, q2 = _map_zeta(a, a0, k, zeta[j])
        gs[j] = g
        es[j] = e
        hs[j] = h
        zs[j] = z
        dzs[j] = dz
        q2s[j] = q2


@kernel
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


@kernel
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


#: the analytic derivatives the refinements find zeros of
_D_LNQ = 0  # d ln q/dφ (speed maxima; the parameter is α')


_D_LN_DIST_TE = 1  # d ln|z − k|/dφ (the leading edge, farthest from the trailing edge)


@kernel
def _dlnq(phi, alpha_c, q2):
    """d ln q/dφ on the circle at φ for the circle-plane angle α', where ζ z''/z' = q2:
    d ln|w|/dφ = cos(φ − α')/(sin(φ − α') + sin α') and d ln|z'|/dφ = −Im(ζ z''/z') (the
    compiled form of :func:`foilmap.section.flow.speed_log_derivative`)."""
    return math.cos(phi - alpha_c) / (math.sin(phi - alpha_c) + math.sin(alpha_c)) + q2.imag


@kernel
def _deriv(kind, a, a0, k, phi, param):
    """One of the analytic derivatives along the circle, at φ."""
    g, e, h, z, dz, q2 = map_point(a, a0, k, phi)
    if kind == _D_LNQ:
        return _dlnq(phi, param, q2)
    zeta = complex(math.cos(phi), math.sin(phi))
    return -(zeta * dz / (z - k)).imag


@kernel
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


@kernel
def _speed(a, a0, k, u, phi, alpha_c):
    dz = map_point(a, a0, k, phi)[4]
    return 2.0 * u * abs(math.sin(phi - alpha_c) + math.sin(alpha_c)) / abs(dz)


@kernel
def _arg_dist(x, ref):
    """Distance of angle x from angle ref, in [0, π]."""
    d = (x - ref) % _TWO_PI
    return _TWO_PI - d if d > math.pi else d


@kernel
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


@kernel
def _grid_phi(p):
    return (np.arange(p) + 0.5) * (_TWO_PI / p)


@kernel
def _stations(m):
    """m cosine-spaced chord stations inside (0, 1) (the crossing witness, thickness, camber)."""
    xs = np.empty(m)
    for i in range(m):
        xs[i] = 0.5 * (1.0 - math.cos(math.pi * (i + 1) / (m + 1)))
    return xs
