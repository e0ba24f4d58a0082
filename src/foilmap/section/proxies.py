"""Adverse-pressure-gradient proxies along a surface (docs/method.md, "Recovery proxies").

All functions take surface distributions ordered from the stagnation point, shape (B, M):
``s`` the arc length from the stagnation point in chords, ``u`` the speed ratio q/V∞, ``du_ds``
its analytic gradient, and a boolean ``mask`` of the points that take part (padding and the
region beyond the proxy end station are False; the mask is one contiguous block of each row).

Three proxies are offered:

``severity`` (the default)
    The largest −m = −(s/u) du/ds along the pressure recovery (after the suction peak).  m is the
    local Falkner–Skan exponent (u ∝ sᵐ); similar laminar layers separate at m = −0.0904
    (Hartree 1937), turbulent layers tolerate several times more.  It needs no Reynolds number
    and no transition assumption, is continuous in the design variables and grades the steepest
    part of the recovery, which is why it is the default objective.
``thwaites``
    Thwaites' laminar method (Thwaites 1949): θ² Re/c = 0.45 u⁻⁶ ∫₀ˢ u⁵ ds, λ = (θ² Re/c) du/ds,
    laminar separation where λ = −0.09.  Reynolds-number free; the laminar run to separation and
    the most negative λ before it are the proxies.
``stratford``
    Stratford's turbulent separation criterion (J. Fluid Mech. 5, 1959) for a layer turbulent from
    the stagnation point: C̄p (x' dC̄p/dx)^{1/2} (10⁻⁶ Re')^{−0.1} = k, C̄p = 1 − (u/u_peak)² (valid for
    C̄p < 4/7), k = 0.39 where d²C̄p/dx² > 0 and 0.35 otherwise, x' = ∫₀^{x_m} (u/u_peak)³ dx +
    (x − x_m), Re' = u_peak x' Re.  Its margin is the largest left side over k (≥ 1: separation).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = [
    "THWAITES_A",
    "THWAITES_B",
    "THWAITES_SEPARATION",
    "ThwaitesResult",
    "thwaites",
    "StratfordResult",
    "stratford",
    "recovery_severity",
]

#: Thwaites' constants: θ² U/ν = (a/U^b) ∫ U^{b−1} dx with a = 0.45, b = 6 (Thwaites 1949;
#: White, Viscous Fluid Flow, eq. 4-129)
THWAITES_A = 0.45
THWAITES_B = 6.0
#: λ at laminar separation in Thwaites' correlation (Thwaites 1949; White, Viscous Fluid Flow)
THWAITES_SEPARATION = -0.09


def _cumtrapz(f: np.ndarray, s: np.ndarray, mask: np.ndarray) -> np.ndarray:
    """Cumulative trapezoidal integral along axis 1 over the masked block, 0 before it."""
    inc = 0.5 * (f[:, 1:] + f[:, :-1]) * np.diff(s, axis=1)
    inc = np.where(mask[:, 1:] & mask[:, :-1], inc, 0.0)
    return np.concatenate([np.zeros((f.shape[0], 1)), np.cumsum(inc, axis=1)], axis=1)


def _first_crossing(cond, value, level, s, mask):
    """s where ``value`` first crosses ``level`` (linear interpolation), NaN if never.

    ``cond`` marks the points where the crossing has happened; returns (s_cross, index).
    """
    nb, m = cond.shape
    any_ = cond.any(axis=1)
    j = np.argmax(cond, axis=1)
    jm = np.maximum(j - 1, 0)
    r = np.arange(nb)
    v0, v1 = value[r, jm], value[r, j]
    s0, s1 = s[r, jm], s[r, j]
    with np.errstate(all="ignore"):
        frac = np.where((j > 0) & mask[r, jm], (level - v0) / (v1 - v0), 1.0)
    frac = np.where(np.isfinite(frac), np.clip(frac, 0.0, 1.0), 1.0)
    sc = s0 + frac * (s1 - s0)
    return np.where(any_, sc, np.nan), np.where(any_, j, -1)


@dataclass(frozen=True)
class ThwaitesResult:
    """Thwaites' laminar method along each row.

    Attributes
    ----------
    theta2_re : ndarray (B, M), θ² Re / c (momentum thickness squared times chord Reynolds number)
    lam : ndarray (B, M), λ = (θ² Re/c) du/ds
    separation_s : ndarray (B,), arc length of laminar separation (NaN: none before the end)
    min_lambda : ndarray (B,), most negative λ before separation (or before the end)
    """

    theta2_re: np.ndarray
    lam: np.ndarray
    separation_s: np.ndarray
    min_lambda: np.ndarray


def thwaites(
    s: np.ndarray,
    u: np.ndarray,
    du_ds: np.ndarray,
    mask: np.ndarray | None = None,
    integral0: np.ndarray | float = 0.0,
) -> ThwaitesResult:
    """Thwaites' laminar integral method, batch-vectorised.

    Parameters
    ----------
    s, u, du_ds : ndarray, shape (B, M)
        Arc length (chords), speed ratio and its gradient, ordered from the origin of the layer.
    mask : ndarray of bool, shape (B, M), optional
        Points taking part; default all.
    integral0 : float or ndarray (B,)
        ∫ u⁵ ds from the true origin to ``s[:, 0]`` (for a stagnation origin with u ∝ s this is
        u₀⁵ s₀ / 6; zero when the first point is the origin).
    """
    s = np.atleast_2d(s)
    u = np.atleast_2d(u)
    du_ds = np.atleast_2d(du_ds)
    mask = np.ones(u.shape, dtype=bool) if mask is None else mask
    # ∫ u⁵ ds with u linear between points: Δs (u₀⁵ + u₀⁴u₁ + … + u₁⁵)/6, exact for the
    # u ∝ s of a stagnation point where the trapezoidal rule is poor
    um = np.where(mask, u, 0.0)
    u0, u1 = um[:, :-1], um[:, 1:]
    poly = u0**5 + u0**4 * u1 + u0**3 * u1**2 + u0**2 * u1**3 + u0 * u1**4 + u1**5
    inc = np.where(mask[:, 1:] & mask[:, :-1], poly * np.diff(s, axis=1) / 6.0, 0.0)
    integral = np.concatenate([np.zeros((u.shape[0], 1)), np.cumsum(inc, axis=1)], axis=1)
    integral += np.reshape(integral0, (-1, 1))
    with np.errstate(all="ignore"):
        theta2 = THWAITES_A * integral / u ** THWAITES_B
        lam = theta2 * du_ds
    sep = mask & (lam < THWAITES_SEPARATION)
    sep_s, j = _first_crossing(sep, lam, THWAITES_SEPARATION, s, mask)
    before = mask & ((np.arange(u.shape[1])[None, :] < j[:, None]) | (j[:, None] < 0))
    min_lam = np.min(np.where(before, lam, np.inf), axis=1)
    min_lam = np.where(np.isfinite(min_lam), min_lam, np.nan)
    return ThwaitesResult(theta2, lam, sep_s, min_lam)


def _after_peak(u: np.ndarray, mask: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Index of the speed peak of each row and the mask of the recovery after it."""
    jp = np.argmax(np.where(mask, u, -np.inf), axis=1)
    idx = np.arange(u.shape[1])[None, :]
    return jp, mask & (idx > jp[:, None])


def recovery_severity(
    s: np.ndarray, u: np.ndarray, du_ds: np.ndarray, mask: np.ndarray,
    closing: tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray] | None = None,
) -> np.ndarray:
    """Largest −(s/u) du/ds over the recovery after the suction peak, shape (B,).

    ``closing = (s_end, u_end, s_te, u_te)``, if given, charges the recovery still owed where the
    proxies stop: a uniform deceleration from u_end at s_end to u_te at the trailing edge s_te,
    m = −(s_end/u_end)(u_te − u_end)/(s_te − s_end).  Without it a search can move the suction
    peak past the end station and hide its recovery.  Zero where the speed never falls.
    """
    _, rec = _after_peak(u, mask)
    with np.errstate(all="ignore"):
        m = s / u * du_ds
    worst = np.max(np.where(rec & np.isfinite(m), -m, -np.inf), axis=1)
    if closing is not None:
        s_end, u_end, s_te, u_te = closing
        with np.errstate(all="ignore"):
            m_close = s_end / u_end * (u_end - u_te) / (s_te - s_end)
        worst = np.fmax(worst, np.where(np.isfinite(m_close), m_close, -np.inf))
    return np.maximum(worst, 0.0)


@dataclass(frozen=True)
class StratfordResult:
    """Stratford's criterion along each row.

    Attributes
    ----------
    margin : ndarray (B,), largest C̄p (x' dC̄p/dx)^{1/2} (10⁻⁶ Re')^{−0.1} / k over the recovery
    separation_s : ndarray (B,), arc length where the margin first reaches 1 (NaN: never)
    """

    margin: np.ndarray
    separation_s: np.ndarray


def stratford(
    s: np.ndarray, u: np.ndarray, du_ds: np.ndarray, mask: np.ndarray, reynolds: float,
    closing: tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray] | None = None,
) -> StratfordResult:
    """Stratford's turbulent separation criterion over the recovery after the suction peak.

    Parameters
    ----------
    reynolds : float
        Chord Reynolds number V∞ c / ν.
    closing : (s_end, u_end, s_te, u_te), optional
        The recovery still owed at the end station, as in :func:`recovery_severity`: the
        criterion is also evaluated at the trailing edge with C̄p = 1 − (u_te/u_peak)² and the
        mean gradient from the end station.
    """
    nb, m = u.shape
    r = np.arange(nb)
    jp, rec = _after_peak(u, mask)
    u_pk = u[r, jp]
    s_pk = s[r, jp]
    ratio = np.where(mask, u, 0.0) / u_pk[:, None]
    # x' = ∫₀^{s_m} (u/u_peak)³ ds + (s − s_m)
    x_eff = _cumtrapz(ratio**3, s, mask)[r, jp][:, None] + (s - s_pk[:, None])
    cpbar = 1.0 - ratio**2
    dcp = -2.0 * ratio * du_ds / u_pk[:, None]
    # d²C̄p/ds² by central differences along the row
    d2 = np.zeros_like(dcp)
    with np.errstate(all="ignore"):
        d2[:, 1:-1] = (dcp[:, 2:] - dcp[:, :-2]) / (s[:, 2:] - s[:, :-2])
    k = np.where(d2 > 0.0, 0.39, 0.35)
    rex = 1e-6 * reynolds * u_pk[:, None] * x_eff
    valid = rec & (cpbar < 4.0 / 7.0) & (dcp > 0.0) & (x_eff > 0.0)
    with np.errstate(all="ignore"):
        lhs = cpbar * np.sqrt(np.where(valid, x_eff * dcp, 0.0)) * rex**-0.1 / k
    lhs = np.where(valid & np.isfinite(lhs), lhs, 0.0)
    margin = lhs.max(axis=1)
    # a recovery that passes C̄p = 4/7 inside the mask is beyond the criterion's range: separated
    beyond = rec & (cpbar >= 4.0 / 7.0)
    sep_s, _ = _first_crossing((lhs >= 1.0) | beyond, np.where(beyond, 1.0, lhs), 1.0, s, mask)
    margin = np.where(beyond.any(axis=1), np.maximum(margin, 1.0), margin)
    if closing is not None:
        s_end, u_end, s_te, u_te = closing
        ds = s_te - s_end
        cp_end = 1.0 - (u_end / u_pk) ** 2
        cp_te = 1.0 - (np.minimum(u_te, u_pk) / u_pk) ** 2
        with np.errstate(all="ignore"):
            slope = (cp_te - cp_end) / ds
            x_te = _cumtrapz(ratio**3, s, mask)[r, jp] + (s_te - s_pk)
            lhs_te = cp_te * np.sqrt(np.maximum(x_te * slope, 0.0)) * (
                1e-6 * reynolds * u_pk * x_te) ** -0.1 / 0.35
        lhs_te = np.where(np.isfinite(lhs_te) & (ds > 0), lhs_te, 0.0)
        lhs_te = np.where(cp_te >= 4.0 / 7.0, np.maximum(lhs_te, 1.0), lhs_te)
        sep_te = (lhs_te >= 1.0) & np.isnan(sep_s)
        sep_s = np.where(sep_te, s_te, sep_s)
        margin = np.fmax(margin, lhs_te)
    return StratfordResult(margin, sep_s)
