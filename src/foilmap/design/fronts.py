"""Pareto-front indicators, through moocore, with the input checks moocore does not make.

moocore scores points beyond the reference point and NaN as silently contributing nothing; here
such input is refused with a clear error instead (:class:`FrontError`).  All objectives are
minimised.  moocore's API has moved between minor versions: the project pins it.
"""

from __future__ import annotations

import numpy as np

__all__ = ["FrontError", "nondominated_mask", "merge_archive", "hypervolume",
           "epsilon_additive", "median_attainment", "knee_index", "is_multi_objective"]


def is_multi_objective(study) -> bool:
    """Whether a study's runs search Pareto fronts (COMO-CMA-ES or ε-constraint sweeps) rather
    than one best design (a :class:`~foilmap.design.study.Study`)."""
    return any(r.search["method"] != "cmaes" for r in study.runs())


class FrontError(ValueError):
    """Points that cannot be scored as asked (NaN, or beyond the reference point)."""


def _points(points) -> np.ndarray:
    p = np.atleast_2d(np.asarray(points, dtype=float))
    if p.size and not np.all(np.isfinite(p)):
        raise FrontError("front points contain NaN or infinite objective values")
    return p


def nondominated_mask(points) -> np.ndarray:
    """True for the points no other point dominates (minimisation; duplicates keep one)."""
    import moocore

    p = _points(points)
    if p.shape[0] == 0:
        return np.zeros(0, dtype=bool)
    mask = np.asarray(moocore.is_nondominated(p, keep_weakly=False), dtype=bool)
    return mask


def merge_archive(idx: np.ndarray, pts: np.ndarray, new_idx: np.ndarray, new_pts: np.ndarray):
    """The non-dominated set of an archive and new points: (indices, points), in index order."""
    all_idx = np.concatenate([idx, new_idx]).astype(np.int64)
    all_pts = np.concatenate([pts.reshape(-1, new_pts.shape[1]), new_pts])
    if all_idx.size == 0:
        return all_idx, all_pts
    keep = nondominated_mask(all_pts)
    order = np.argsort(all_idx[keep], kind="stable")
    return all_idx[keep][order], all_pts[keep][order]


def hypervolume(points, reference) -> float:
    """Hypervolume dominated by ``points`` and bounded by ``reference`` (minimisation).

    Raises :class:`FrontError` for NaN or for a point not strictly better than the reference
    in every objective (rather than silently scoring it zero).
    """
    import moocore

    p = _points(points)
    ref = np.asarray(reference, dtype=float)
    if p.shape[0] == 0:
        return 0.0
    if p.shape[1] != ref.size:
        raise FrontError(f"points have {p.shape[1]} objectives, the reference point {ref.size}")
    beyond = ~np.all(p < ref, axis=1)
    if beyond.any():
        worst = p[beyond][0]
        raise FrontError(f"{int(beyond.sum())} front point(s) lie beyond the reference point "
                         f"{ref.tolist()} (for example {np.round(worst, 6).tolist()}); choose a "
                         "larger reference point")
    return float(moocore.hypervolume(p, ref=ref))


def epsilon_additive(a, b) -> float:
    """Additive ε-indicator I(A, B): the least ε by which A, shifted, weakly dominates B."""
    import moocore

    return float(moocore.epsilon_additive(_points(a), ref=_points(b)))


def median_attainment(fronts: list[np.ndarray]) -> np.ndarray:
    """The 50 % attainment surface of several 2- or 3-objective fronts (one per run), (m, K)."""
    import moocore

    pts = np.concatenate([_points(f) for f in fronts])
    sets = np.concatenate([np.full(len(f), i + 1) for i, f in enumerate(fronts)])
    out = moocore.eaf(pts, sets=sets, percentiles=[50])
    return np.asarray(out)[:, :-1]


def knee_index(points) -> int:
    """The knee of a front: with objectives normalised to [0, 1] over the front, the point
    farthest below the line through the two extreme points (2 objectives), or the point of the
    least normalised sum (3 objectives) — common practice."""
    p = _points(points)
    if p.shape[0] <= 2:
        return 0
    lo, hi = p.min(axis=0), p.max(axis=0)
    span = np.where(hi > lo, hi - lo, 1.0)
    q = (p - lo) / span
    if p.shape[1] == 2:
        a, b = q[np.argmin(q[:, 0])], q[np.argmin(q[:, 1])]
        d = b - a

        def side(v):
            return d[0] * (v[..., 1] - a[1]) - d[1] * (v[..., 0] - a[0])

        s = side(q)
        toward_ideal = np.sign(s) == np.sign(side(np.zeros(2)))
        return int(np.argmax(np.where(toward_ideal, np.abs(s), -1.0)))
    return int(np.argmin(q.sum(axis=1)))
