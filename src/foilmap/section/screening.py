"""Integral boundary-layer screening along the exact inviscid surface speed.

A first screening of which designs deserve a viscous solver — not a replacement for one.  On each
surface from the stagnation point:

* laminar: Thwaites' method (Thwaites 1949) with the Cebeci–Bradshaw fits of H(λ) and ℓ(λ)
  (White, Viscous Fluid Flow, §4-6); laminar separation at λ = −0.09;
* transition: Michel's criterion in the Cebeci–Smith form
  Re_θ ≥ 1.174 (1 + 22 400/Re_x) Re_x^0.46 (Cebeci & Bradshaw, Momentum Transfer in Boundary
  Layers, 1977); a laminar separation ahead of it is taken as transition there (a short bubble);
* turbulent: Head's entrainment method (ARC R&M 3152, 1958) with Cebeci–Bradshaw's H₁(H) and
  F(H₁) fits and the Ludwieg–Tillmann skin friction Cf = 0.246·10^(−0.678 H) Re_θ^(−0.268),
  started with H = 1.4 (common practice), marched by Heun's method; turbulent separation at
  H = 2.4 (common practice);
* drag: Squire & Young's formula Cd = Σ 2 θ u^((H + 5)/2) over both surfaces, at the station
  ``drag_station`` (the ideal flow stagnates at a finite-angle trailing edge, so the formula is
  taken where the ideal speed is still representative; default 0.95 chord).  The formula does
  not hold past a turbulent separation: where either surface separates before the drag station
  Cd is NaN (as an objective, such a design ranks below every attached one).

The marching loops over stations (an ODE is sequential) and is vectorised over candidates.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from foilmap.section.proxies import THWAITES_SEPARATION, thwaites

__all__ = ["SurfaceLayer", "screen_surface", "ScreenResult", "screen_analysis",
           "thwaites_shape", "head_h1", "head_h_from_h1", "head_entrainment",
           "ludwieg_tillmann", "michel_re_theta", "H_SEPARATION", "H_START"]

#: shape factor at which a turbulent layer is taken as separated (common practice)
H_SEPARATION = 2.4
#: shape factor of a turbulent layer just after transition (common practice)
H_START = 1.4
#: chord station of the Squire–Young drag estimate
DRAG_STATION = 0.95


def thwaites_shape(lam):
    """H(λ) and ℓ(λ) of Thwaites' method (Cebeci–Bradshaw fits; White, Viscous Fluid Flow)."""
    lam = np.clip(lam, -0.1, 0.25)
    pos = lam >= 0
    with np.errstate(all="ignore"):
        h = np.where(pos, 2.61 - 3.75 * lam + 5.24 * lam**2, 2.088 + 0.0731 / (lam + 0.14))
        ell = np.where(pos, 0.22 + 1.57 * lam - 1.8 * lam**2,
                       0.22 + 1.402 * lam + 0.018 * lam / (lam + 0.107))
    return h, ell


def head_h1(h):
    """Head's entrainment shape factor H₁(H) (Cebeci–Bradshaw fit)."""
    h = np.maximum(h, 1.1001)
    with np.errstate(all="ignore"):
        return np.where(h <= 1.6, 3.3 + 0.8234 * (h - 1.1) ** -1.287,
                        3.3 + 1.5501 * (h - 0.6778) ** -3.064)


def head_h_from_h1(h1):
    """The inverse fit H(H₁) (Cebeci–Bradshaw)."""
    h1 = np.maximum(h1, 3.3001)
    with np.errstate(all="ignore"):
        return np.where(h1 <= 5.3, 1.1 + 0.86 * (h1 - 3.3) ** -0.777,
                        0.6778 + 1.1536 * (h1 - 3.3) ** -0.326)


def head_entrainment(h1):
    """Head's entrainment function F(H₁) = 0.0306 (H₁ − 3)^(−0.6169)."""
    return 0.0306 * np.maximum(h1 - 3.0, 1e-6) ** -0.6169


def ludwieg_tillmann(h, re_theta):
    """Cf = 0.246 · 10^(−0.678 H) · Re_θ^(−0.268) (Ludwieg & Tillmann 1949)."""
    return 0.246 * 10.0 ** (-0.678 * h) * np.maximum(re_theta, 1.0) ** -0.268


def michel_re_theta(re_x):
    """Transition Re_θ of Michel's criterion, Cebeci–Smith form."""
    re_x = np.maximum(re_x, 1.0)
    return 1.174 * (1.0 + 22400.0 / re_x) * re_x**0.46


@dataclass(frozen=True)
class SurfaceLayer:
    """The boundary layer of one surface of each candidate; positions are arc lengths in
    chords from the stagnation point (NaN where the event does not happen)."""

    theta: np.ndarray  # (B, M) momentum thickness / chord
    shape: np.ndarray  # (B, M) shape factor H
    cf: np.ndarray  # (B, M) skin friction coefficient (local, on edge speed)
    turbulent: np.ndarray  # (B, M) bool
    s_laminar_separation: np.ndarray  # (B,)
    s_transition: np.ndarray  # (B,)
    transition_by_separation: np.ndarray  # (B,) bool
    s_turbulent_separation: np.ndarray  # (B,)


def screen_surface(s, u, du_ds, mask, reynolds: float, integral0=0.0,
                   s_force_transition=None) -> SurfaceLayer:
    """Laminar, transition and turbulent layer along one surface, arrays (B, M).

    Parameters
    ----------
    s, u, du_ds : arc length (chords), speed ratio and its gradient, from the layer's origin
    mask : bool (B, M), the stations that take part (one contiguous block per row)
    reynolds : chord Reynolds number
    s_force_transition : optional (B,) arc length at which to force transition (tests, trips)
    """
    s, u, du_ds, mask = map(np.atleast_2d, (s, u, du_ds, mask))
    nb, m = u.shape
    r = np.arange(nb)
    lam_res = thwaites(s, u, du_ds, mask, integral0)
    theta_l = np.sqrt(np.maximum(lam_res.theta2_re, 0.0) / reynolds)
    h_l, ell = thwaites_shape(lam_res.lam)
    with np.errstate(all="ignore"):
        cf_l = 2.0 * ell / np.maximum(u * theta_l * reynolds, 1e-12)
    re_x = u * s * reynolds
    re_t = u * theta_l * reynolds
    natural = mask & (re_t >= michel_re_theta(re_x)) & (s > 0)
    lam_sep = mask & (lam_res.lam < THWAITES_SEPARATION)
    big = m + 1
    i_nat = np.where(natural.any(1), np.argmax(natural, 1), big)
    i_sep = np.where(lam_sep.any(1), np.argmax(lam_sep, 1), big)
    i_tr = np.minimum(i_nat, i_sep)
    if s_force_transition is not None:
        forced = mask & (s >= np.reshape(s_force_transition, (-1, 1)))
        i_f = np.where(forced.any(1), np.argmax(forced, 1), big)
        i_tr = np.minimum(i_tr, i_f)
    by_sep = (i_sep <= i_nat) & (i_sep < big)
    if s_force_transition is not None:
        by_sep &= i_sep <= i_f
    has_tr = i_tr < big
    s_tr = np.where(has_tr, s[r, np.minimum(i_tr, m - 1)], np.nan)
    s_lsep = np.where(i_sep < big, s[r, np.minimum(i_sep, m - 1)], np.nan)
    # turbulent march (Head) from the transition station of each row
    theta = theta_l.copy()
    shape = h_l.copy()
    cf = cf_l.copy()
    turb = np.zeros((nb, m), dtype=bool)
    th = np.where(has_tr, theta_l[r, np.minimum(i_tr, m - 1)], np.nan)
    h1 = np.full(nb, float(head_h1(H_START)))
    separated = np.zeros(nb, dtype=bool)
    s_tsep = np.full(nb, np.nan)

    def rates(th, h1, uu, dd):
        h = head_h_from_h1(h1)
        cfv = ludwieg_tillmann(h, uu * th * reynolds)
        dth = 0.5 * cfv - (h + 2.0) * th / uu * dd
        dh1 = head_entrainment(h1) / th - h1 * (dth / th + dd / uu)
        return dth, dh1

    for j in range(m):
        start = has_tr & (j == i_tr)
        live = has_tr & (j > i_tr) & mask[:, j] & ~separated
        if live.any():
            ds = s[:, j] - s[:, j - 1]
            u0, u1 = u[:, j - 1], u[:, j]
            d0, d1 = du_ds[:, j - 1], du_ds[:, j]
            with np.errstate(all="ignore"):
                k1t, k1h = rates(th, h1, u0, d0)
                tp, hp = th + ds * k1t, h1 + ds * k1h
                k2t, k2h = rates(tp, hp, u1, d1)
                th_new = th + 0.5 * ds * (k1t + k2t)
                h1_new = h1 + 0.5 * ds * (k1h + k2h)
            ok = live & np.isfinite(th_new) & np.isfinite(h1_new) & (th_new > 0)
            th = np.where(ok, th_new, th)
            h1 = np.where(ok, h1_new, h1)
            hh = head_h_from_h1(h1)
            sep_now = live & ((hh >= H_SEPARATION) | ~ok)
            s_tsep = np.where(sep_now & np.isnan(s_tsep), s[:, j], s_tsep)
            separated |= sep_now
        now = start | live
        hh = head_h_from_h1(h1)
        theta[:, j] = np.where(now, th, theta[:, j])
        shape[:, j] = np.where(now, hh, shape[:, j])
        cf[:, j] = np.where(now, ludwieg_tillmann(hh, u[:, j] * th * reynolds), cf[:, j])
        turb[:, j] = now | (has_tr & (j > i_tr) & separated & mask[:, j])
    return SurfaceLayer(theta, shape, cf, turb, s_lsep, s_tr, by_sep, s_tsep)


@dataclass(frozen=True)
class ScreenResult:
    """Screening of a batch of sections at one operating point, shapes (B,) per surface."""

    cd: np.ndarray
    reynolds: float
    x_transition: dict  # "upper"/"lower" → (B,)
    transition_by_separation: dict
    x_laminar_separation: dict
    x_turbulent_separation: dict
    theta_drag_station: dict
    shape_drag_station: dict

    def record(self, i: int = 0) -> dict:
        """JSON-ready figures of candidate ``i`` (NaN → None)."""
        def f(v):
            v = float(v)
            return v if np.isfinite(v) else None

        rec = {"cd": f(self.cd[i]), "reynolds": self.reynolds}
        for side in ("upper", "lower"):
            rec[side] = {
                "x_transition": f(self.x_transition[side][i]),
                "transition_by_laminar_separation": bool(self.transition_by_separation[side][i]),
                "x_laminar_separation": f(self.x_laminar_separation[side][i]),
                "x_turbulent_separation": f(self.x_turbulent_separation[side][i]),
                "theta_at_drag_station": f(self.theta_drag_station[side][i]),
                "shape_factor_at_drag_station": f(self.shape_drag_station[side][i]),
            }
        return rec


def _x_of(surface, s_query):
    from foilmap.section.evaluation import _x_at

    return _x_at(surface, s_query)


def screen_analysis(analysis, reynolds: float, drag_station: float = DRAG_STATION,
                    samples: int = 1024) -> ScreenResult:
    """Screen the sections of an :class:`~foilmap.section.evaluation.Analysis` at its operating point.

    The surface speeds are the exact ones on a fine circle grid (``samples``).
    """
    from foilmap.section.evaluation import surfaces_on_grid

    sec = analysis.sections
    upper, lower = surfaces_on_grid(analysis, samples)
    out = {k: {} for k in ("xt", "bysep", "xls", "xts", "th", "h")}
    cd = np.zeros(len(sec))
    for name, sf in (("upper", upper), ("lower", lower)):
        mask = sf.until(drag_station)
        lay = screen_surface(sf.s, sf.u, sf.du_ds, mask, reynolds, sf.integral0)
        s_end, u_end = sf.end_state(mask)
        nb, m = mask.shape
        last = m - 1 - np.argmax(mask[:, ::-1], axis=1)
        r = np.arange(nb)
        th, h = lay.theta[r, last], lay.shape[r, last]
        # Squire–Young: Cd = 2 θ u^((H + 5)/2) at the drag station, per surface; it does not
        # hold past a turbulent separation, so a separated surface leaves Cd undefined (NaN)
        separated = np.isfinite(lay.s_turbulent_separation)
        with np.errstate(all="ignore"):
            cd = cd + np.where(separated, np.nan, 2.0 * th * u_end ** ((h + 5.0) / 2.0))
        out["xt"][name] = _x_of(sf, lay.s_transition)
        out["bysep"][name] = lay.transition_by_separation
        out["xls"][name] = _x_of(sf, lay.s_laminar_separation)
        out["xts"][name] = _x_of(sf, lay.s_turbulent_separation)
        out["th"][name] = th
        out["h"][name] = h
    cd = np.where(analysis.evaluation.status == 0, cd, np.nan)
    return ScreenResult(cd, reynolds, out["xt"], out["bysep"], out["xls"], out["xts"],
                        out["th"], out["h"])
