"""Small vectorised numerical helpers shared by the kernels."""

from __future__ import annotations

from typing import Callable

import numpy as np

__all__ = ["bracketed_root", "refine_extremum", "interp_rows"]


def bracketed_root(
    fun: Callable[[np.ndarray, np.ndarray], np.ndarray],
    a: np.ndarray,
    b: np.ndarray,
    fa: np.ndarray,
    fb: np.ndarray,
    xtol: float = 1e-11,
    maxiter: int = 60,
) -> np.ndarray:
    """Roots of many scalar functions at once by the Illinois method (modified regula falsi).

    Parameters
    ----------
    fun : callable
        ``fun(x, rows)`` returns f at ``x`` (shape ``(m,)``) for the candidates ``rows``.
    a, b : ndarray, shape (B,)
        Bracket ends with ``fa * fb <= 0``.  Rows without a sign change return ``a``.
    xtol : float
        Bracket width at which a row is converged.

    Returns
    -------
    ndarray, shape (B,)
        The root of each row.  The Illinois step halves the retained end's value, so both ends
        move and the bracket width goes to zero superlinearly (Dowell & Jarratt 1971).
    """
    a = np.array(a, dtype=float)
    b = np.array(b, dtype=float)
    fa = np.array(fa, dtype=float)
    fb = np.array(fb, dtype=float)
    x = a.copy()
    active = np.isfinite(fa) & np.isfinite(fb) & (np.sign(fa) != np.sign(fb))
    x[fb == 0] = b[fb == 0]
    active &= (fa != 0) & (fb != 0)
    for _ in range(maxiter):
        active &= np.abs(b - a) > xtol
        rows = np.flatnonzero(active)
        if rows.size == 0:
            break
        ar, br, far, fbr = a[rows], b[rows], fa[rows], fb[rows]
        with np.errstate(all="ignore"):
            c = br - fbr * (br - ar) / (fbr - far)
        lo, hi = np.minimum(ar, br), np.maximum(ar, br)
        bad = ~np.isfinite(c) | (c <= lo) | (c >= hi)
        c = np.where(bad, 0.5 * (ar + br), c)
        fc = fun(c, rows)
        fc = np.where(np.isfinite(fc), fc, 0.0)
        flip = np.sign(fc) != np.sign(fbr)
        # new bracket [b, c] where the sign changes between them, else keep a and halve f(a)
        a[rows] = np.where(flip, br, ar)
        fa[rows] = np.where(flip, fbr, 0.5 * far)
        b[rows] = c
        fb[rows] = fc
        x[rows] = c
        done = fc == 0
        active[rows[done]] = False
    return x


def refine_extremum(
    dfun: Callable[[np.ndarray, np.ndarray], np.ndarray],
    x_grid: np.ndarray,
    index: np.ndarray,
    step: float,
    xtol: float = 1e-11,
) -> np.ndarray:
    """Refine a sampled extremum by finding the zero of its analytic derivative.

    Parameters
    ----------
    dfun : callable
        ``dfun(x, rows)``: derivative of the sampled quantity (any positive factor allowed).
    x_grid : ndarray, shape (P,)
        Uniform sample positions.
    index : ndarray of int, shape (B,)
        Sample index of each row's extremum.
    step : float
        Grid spacing.

    Returns
    -------
    ndarray, shape (B,)
        Refined abscissa; rows where no sign change brackets the sample keep the sample.
    """
    x0 = x_grid[index]
    rows = np.arange(index.size)
    d0 = dfun(x0, rows)
    dm = dfun(x0 - step, rows)
    dp = dfun(x0 + step, rows)
    # bracket on the side where the derivative changes sign
    right = np.sign(d0) != np.sign(dp)
    a = np.where(right, x0, x0 - step)
    b = np.where(right, x0 + step, x0)
    fa = np.where(right, d0, dm)
    fb = np.where(right, dp, d0)
    ok = np.sign(fa) != np.sign(fb)
    root = bracketed_root(dfun, a, b, fa, fb, xtol=xtol)
    return np.where(ok, root, x0)


def interp_rows(xq: np.ndarray, xp: np.ndarray, fp: np.ndarray) -> np.ndarray:
    """Row-wise linear interpolation, ``np.interp`` over a batch in one call.

    Parameters
    ----------
    xq : ndarray, shape (B, M) or (M,)
        Query points (shared by all rows when 1-D).
    xp : ndarray, shape (B, P)
        Increasing abscissae of each row, all within a span smaller than ``1e3``.
    fp : ndarray, shape (B, P)
        Values.
    """
    nb = xp.shape[0]
    lo = np.nanmin(xp, axis=1, keepdims=True)
    span = np.nanmax(xp, axis=1, keepdims=True) - lo
    width = float(np.nanmax(span)) if span.size else 1.0
    width = 4.0 * (width if np.isfinite(width) and width > 0 else 1.0)
    offset = width * np.arange(nb)[:, None]
    xq = np.broadcast_to(xq, (nb,) + np.shape(xq)[-1:])
    # clamp queries to each row's range so that rows never bleed into each other
    xqc = np.clip(xq, lo, lo + span)
    out = np.interp((xqc - lo + offset).ravel(), (xp - lo + offset).ravel(), fp.ravel())
    return out.reshape(xq.shape)
