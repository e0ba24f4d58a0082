"""Conformal fit: the shape-series coefficients of a given section (Theodorsen & Garrick,
NACA Report 452, 1933, with the Kármán–Trefftz first stage).

1. The given contour (chord frame, closed trailing edge) is splined as y(u) with
   x = (1 + cos u)/2, u from 0 (TE, upper) through π (LE) to 2π (TE, lower): smooth through a
   round leading edge; the spline is clamped (dy/du = 0) at a finite-angle trailing edge.
2. The trailing-edge angle τ is measured from the last points of each surface; k = 2 − τ/π.
3. The section is placed in the map plane with the TE at z = k and the second singular point
   z = −k midway between the LE and its centre of curvature (Theodorsen–Garrick's choice).
4. The inverse Kármán–Trefftz map, with the argument unwrapped along the contour, gives the
   near-circle z₁; its log-radius ψ is splined as a periodic function of its polar angle θ.
5. Theodorsen's conjugate-function iteration: with ε(φ) the angle correction,
   ψ(φ) = log R(φ + ε(φ)), and ε the harmonic conjugate of ψ (by FFT), normalised so that
   ε(0) = 0 (the TE at φ = 0).  Then A₀ + Σ Aₙ ζ⁻ⁿ has real part ψ and imaginary part ε on the
   circle, and Aₙ = 2 conj(ĉₙ) from the FFT coefficients ĉₙ of ψ.
6. The deviation of the mapped contour from the given one is measured in chords.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["FitResult", "SectionFit", "fit_coordinates", "fit_section", "te_angle_from_points",
           "contour_deviation", "contour_distances", "dense_reference"]


@dataclass(frozen=True)
class FitResult:
    """A conformal fit.

    Attributes
    ----------
    coefficients : ndarray complex (M,), A₁..A_M of the converged series (M = samples/2 − 1)
    te_angle : float, τ in radians
    iterations : Theodorsen iterations used
    converged : whether the angle correction settled to the tolerance
    source_le : the given contour's leading edge (its chord line's start) in the map plane
    singular_point : p_s, the chord-frame point of the given contour that the map plane's
        z = −k corresponds to: the given frame is z = k (2 (zc − p_s)/(1 − p_s) − 1)
    """

    coefficients: np.ndarray
    te_angle: float
    iterations: int
    converged: bool
    source_le: complex = 0j
    singular_point: complex = 0j

    def to_given_frame(self, z: np.ndarray) -> np.ndarray:
        """Map-plane points in the chord frame of the contour that was fitted."""
        k = 2.0 - self.te_angle / np.pi
        p_s = self.singular_point
        return (z / k + 1.0) * 0.5 * (1.0 - p_s) + p_s

    def truncated(self, n: int) -> np.ndarray:
        return self.coefficients[:n].copy()


def te_angle_from_points(xy: np.ndarray, le: int, span: float = 0.02) -> float:
    """Trailing-edge interior angle from the points within ``span`` of the TE on each surface.

    Near a Kármán–Trefftz trailing edge a surface is y = b d + c d^{1+1/k} + e d² + … with
    d = 1 − x (the map's expansion in (z₁ − 1)^k); the three terms are fitted by least squares
    on each surface and τ = atan(b_upper) − atan(b_lower), iterated twice on k = 2 − τ/π.  For an
    analytic trailing edge (a formula section) the middle term simply comes out small.
    """
    def slope(pts, k):
        sel = pts[(1.0 - pts[:, 0]) <= span]
        if sel.shape[0] < 5:
            sel = pts[np.argsort(1.0 - pts[:, 0])[:6]]
        sel = sel[(1.0 - sel[:, 0]) > 0]
        d = 1.0 - sel[:, 0]
        a = np.column_stack([d, d ** (1.0 + 1.0 / k), d * d])
        b, *_ = np.linalg.lstsq(a, sel[:, 1], rcond=None)
        return b[0]

    up = xy[: le + 1]
    lo = xy[le:]
    k = 2.0
    tau = 0.0
    for _ in range(3):
        tau = max(float(np.arctan(slope(up, k)) - np.arctan(slope(lo, k))), 0.0)
        k = 2.0 - tau / np.pi
    return tau


def _contour_spline(xy: np.ndarray, le: int):
    from scipy.interpolate import CubicSpline

    x = np.clip(xy[:, 0], 0.0, 1.0)
    u = np.arccos(np.clip(2.0 * x - 1.0, -1.0, 1.0))
    u[le + 1 :] = 2.0 * np.pi - u[le + 1 :]
    u[le] = np.pi
    keep = np.concatenate([[True], np.diff(u) > 1e-12])
    return CubicSpline(u[keep], xy[keep, 1], bc_type=((1, 0.0), (1, 0.0)))


def fit_coordinates(xy: np.ndarray, le: int, samples: int = 2048, tol: float = 1e-13,
                    max_iter: int = 400, te_angle: float | None = None,
                    singular_point: complex | None = None, source_le: complex = 0j
                    ) -> FitResult:
    """Theodorsen–Garrick fit of a closed chord-frame contour (TE → upper → LE → lower → TE).

    Parameters
    ----------
    xy : ndarray (n, 2)
        The contour, LE at ``xy[le] = (0, 0)``, TE at (1, 0) at both ends.
    samples : int
        Circle-plane samples (a power of two); coefficients up to samples/2 − 1 are found.
    te_angle : float, optional
        τ in radians; measured from the points by default.
    singular_point : complex, optional
        Chord-frame position of the second singular point (z = −k); by default midway between
        the LE and its centre of curvature.  The map of a section is unique once this point is
        fixed, so a section made by the map is recovered coefficient by coefficient when it is
        given where that map had it.
    """
    from scipy.interpolate import CubicSpline

    spl = _contour_spline(xy, le)
    tau = te_angle_from_points(xy, le) if te_angle is None else float(te_angle)
    k = 2.0 - tau / np.pi
    # dense contour, the TE itself left out (it is z₁ = 1 exactly)
    m = 8 * samples
    u = np.linspace(0.0, 2.0 * np.pi, m + 1)[1:-1]
    zc = 0.5 * (1.0 + np.cos(u)) + 1j * spl(u)
    # LE radius of the (x(u), y(u)) curve at u = π: ρ = 2 (dy/du)² (x' = 0, x'' = ½ there)
    rho = 2.0 * float(spl(np.pi, 1)) ** 2
    # midway between the LE and its centre of curvature, on the chord line
    p_s = 0.5 * rho if singular_point is None else complex(singular_point)
    z = k * (2.0 * (zc - p_s) / (1.0 - p_s) - 1.0)
    w = (z - k) / (z + k)
    arg = np.unwrap(np.angle(w)) / k
    w1 = np.abs(w) ** (1.0 / k) * np.exp(1j * arg)
    z1 = (1.0 + w1) / (1.0 - w1)
    theta = np.unwrap(np.angle(z1))
    theta -= 2.0 * np.pi * np.round(theta[0] / (2 * np.pi))
    logr = np.log(np.abs(z1))
    theta = np.concatenate([[0.0], theta, [2.0 * np.pi]])
    logr = np.concatenate([[0.0], logr, [0.0]])
    order = np.argsort(theta, kind="stable")
    theta, logr = theta[order], logr[order]
    keep = np.concatenate([[True], np.diff(theta) > 1e-14])
    psi_of_theta = CubicSpline(theta[keep], logr[keep], bc_type="periodic")
    # Theodorsen's iteration on a uniform circle grid φⱼ = 2πj/P
    p = samples
    phi = 2.0 * np.pi * np.arange(p) / p
    eps = np.zeros(p)
    n = np.arange(1, p // 2)
    converged = False
    it = 0
    for it in range(1, max_iter + 1):
        psi = psi_of_theta(np.mod(phi + eps, 2.0 * np.pi))
        c = np.fft.fft(psi) / p
        a = 2.0 * np.conj(c[n])  # Aₙ, n = 1..P/2−1
        spec = np.zeros(p, dtype=complex)
        spec[p - n] = a
        f = np.fft.ifft(spec) * p  # Σ Aₙ e^{−inφ}
        new = f.imag - f.imag[0]  # ε = Im A₀ + Im Σ Aₙ e^{−inφ}, with ε(0) = 0
        change = np.max(np.abs(new - eps))
        eps = new
        if change < tol:
            converged = True
            break
    # the given chord frame maps to the map plane by z = k (2 (zc − p_s)/(1 − p_s) − 1): its
    # leading edge zc = 0 is here, and its trailing edge zc = 1 is the map's z = k
    return FitResult(a, tau, it, converged,
                     complex(k * (2.0 * (source_le - p_s) / (1.0 - p_s) - 1.0)), complex(p_s))


def contour_distances(fitted: np.ndarray, given: np.ndarray) -> np.ndarray:
    """Distance (chords) from each fitted point to the given polyline, shape (n,)."""
    from scipy.spatial import cKDTree

    tree = cKDTree(given)
    _, idx = tree.query(fitted, k=1)
    best = np.full(fitted.shape[0], np.inf)
    for off in (-1, 0):  # the two segments meeting at the nearest vertex
        i0 = np.clip(idx + off, 0, given.shape[0] - 2)
        a, b = given[i0], given[i0 + 1]
        ab = b - a
        t = np.clip(np.einsum("ij,ij->i", fitted - a, ab) / np.einsum("ij,ij->i", ab, ab), 0, 1)
        d = np.hypot(*(fitted - (a + t[:, None] * ab)).T)
        best = np.minimum(best, d)
    return best


def contour_deviation(fitted: np.ndarray, given: np.ndarray) -> tuple[float, float]:
    """Max and RMS distance (chords) from fitted points to the given polyline, both (n, 2)."""
    d = contour_distances(fitted, given)
    return float(d.max()), float(np.sqrt(np.mean(d**2)))


@dataclass(frozen=True)
class SectionFit:
    """A fitted section truncated to N coefficients, with what the fit and truncation cost."""

    coefficients: np.ndarray  # complex (N,)
    te_angle: float  # radians
    max_deviation: float  # chords, truncated series against the given contour
    rms_deviation: float
    full_max_deviation: float  # chords, the whole converged series (the fit's own error)
    full_terms: int
    iterations: int
    converged: bool
    fitted_xy: np.ndarray  # (m, 2) the truncated section's contour in the given contour's frame
    #: the source's leading edge in the fitted section's own chord frame: angles, Cl and Cm
    #: measured from the line from here to the trailing edge are the source's
    reference_le: complex = 0j


def _mapped_contour(coefficients: np.ndarray, te_angle: float, points: int = 4001,
                    fit: "FitResult | None" = None):
    """The section's contour, (points, 2), in its own chord frame or (given the fit it came
    from) in the chord frame of the fitted contour; with the status and the source's leading
    edge in the own chord frame (0 without a fit)."""
    from foilmap.section.conformal import SectionSet
    from foilmap.section.evaluation import analyse
    from foilmap.section.geometry import coordinates

    sec = SectionSet(coefficients[None, :], [te_angle])
    an = analyse(sec, alpha=0.0, samples=max(512, 2 * len(coefficients) + 64), proxies=(),
                 singular_margin=1e-4, critical_margin=0.0)
    zc = coordinates(sec, an.frame, an.split, points, "map")[0]
    ref = 0j
    if fit is not None:
        ref = complex(an.frame.to_chord(np.array([[fit.source_le]]))[0, 0])
        zc = fit.to_given_frame(zc / an.frame.scale[0] + an.frame.z_le[0])
    return np.column_stack([zc.real, zc.imag]), int(an.evaluation.status[0]), ref


def dense_reference(xy: np.ndarray, le: int, points: int = 20001) -> np.ndarray:
    """The given contour splined as in the fit, at ``points`` points (for deviations)."""
    spl = _contour_spline(xy, le)
    u = np.linspace(0.0, 2.0 * np.pi, points)
    return np.column_stack([0.5 * (1.0 + np.cos(u)), spl(u)])


def fit_section(xy: np.ndarray, le: int, n: int, samples: int = 2048,
                source_le: complex = 0j) -> SectionFit:
    """Fit, truncate to ``n`` coefficients and measure both deviations in chords.

    ``source_le`` is the source's own leading edge in the chord frame of ``xy``; the fit
    reports the source chord line (from there to the trailing edge) as ``reference_le``.
    """
    fit = fit_coordinates(xy, le, samples=samples, source_le=source_le)
    ref = dense_reference(xy, le)
    full = fit.coefficients[: min(len(fit.coefficients), 256)]
    full_xy, _, _ = _mapped_contour(full, fit.te_angle, fit=fit)
    full_max, _ = contour_deviation(full_xy, ref)
    coeffs = fit.truncated(n)
    fitted, _, reference_le = _mapped_contour(coeffs, fit.te_angle, fit=fit)
    mx, rms = contour_deviation(fitted, ref)
    return SectionFit(coeffs, fit.te_angle, mx, rms, full_max, len(full), fit.iterations,
                      fit.converged, fitted, reference_le)
