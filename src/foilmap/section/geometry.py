"""Section geometry in the chord-normalised frame (docs/method.md, "Geometry").

The leading edge is the contour point farthest from the trailing edge z = k; the frame is
translated, rotated and scaled so that LE = (0, 0) and TE = (1, 0):
``zc = (z − z_LE) / (k − z_LE)``.  Thickness and camber are measured normal to the chord line
(vertical in this frame): t(x) = y_u(x) − y_l(x), camber(x) = (y_u + y_l)/2.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from foilmap.section._kconst import FLOOR_NOSE, FLOOR_STATIONS, FLOOR_TAPER, THICKNESS_STATIONS
from foilmap.section._numerics import interp_rows, refine_extremum
from foilmap.section.conformal import CircleGrid, MapValues, SectionSet, map_at, map_on_grid

__all__ = [
    "ChordFrame",
    "chord_frame",
    "thickness_floor",
    "floor_clearance",
    "leading_edge_radius",
    "SurfaceSplit",
    "split_surfaces",
    "Geometry",
    "section_geometry",
    "thickness_at",
    "station_thickness",
    "coordinates",
]


@dataclass(frozen=True)
class ChordFrame:
    """Leading edge and chord of each section, shapes (B,).

    Attributes
    ----------
    phi_le : circle angle of the leading edge
    z_le : leading edge in map units
    chord : chord length c in map units
    gamma : chord-line inclination γ = arg(z_TE − z_LE) in the map plane, radians
    scale : complex factor 1/(z_TE − z_LE): zc = (z − z_LE) · scale
    """

    phi_le: np.ndarray
    z_le: np.ndarray
    chord: np.ndarray
    gamma: np.ndarray
    scale: np.ndarray

    def to_chord(self, z: np.ndarray) -> np.ndarray:
        """Map-plane points (B, M) to the chord frame."""
        return (z - self.z_le[:, None]) * self.scale[:, None]

    def rebased(self, le_chord: np.ndarray, z_te: np.ndarray) -> "ChordFrame":
        """The frame of another chord line: from the point ``le_chord`` (B,), given in this
        frame's chord coordinates, to the trailing edge ``z_te`` (B,) in the map plane.  A fitted
        section measures its angles, Cl and Cm from its source's chord line this way."""
        z_le = self.z_le + np.asarray(le_chord, dtype=complex) / self.scale
        te_minus_le = z_te - z_le
        return ChordFrame(self.phi_le, z_le, np.abs(te_minus_le), np.angle(te_minus_le),
                          1.0 / te_minus_le)


def chord_frame(sections: SectionSet, mv: MapValues, grid: CircleGrid) -> ChordFrame:
    """Locate the leading edge (farthest point from the TE) to 1e-11 in circle angle."""
    k = sections.k
    dist = np.abs(mv.z - k[:, None])
    j = np.argmax(dist, axis=1)

    def dlog(phi, rows):  # d/dφ ln|z − k| = −Im(ζ z'/(z − k))
        m = map_at(sections[rows], np.exp(1j * phi)[:, None])
        return -np.imag(m.zeta * m.dz / (m.z - k[rows, None]))[:, 0]

    phi_le = refine_extremum(dlog, grid.phi, j, grid.step)
    z_le = map_at(sections, np.exp(1j * phi_le)[:, None]).z[:, 0]
    te_minus_le = k - z_le
    return ChordFrame(phi_le, z_le, np.abs(te_minus_le), np.angle(te_minus_le), 1.0 / te_minus_le)


def _le_radius(sections: SectionSet, frame: ChordFrame) -> np.ndarray:
    """Exact leading-edge radius in chords, (B,): 1/κ at φ_LE, κ = Re(1 + ζz''/z') / |z'|."""
    m = map_at(sections, np.exp(1j * frame.phi_le)[:, None])
    with np.errstate(all="ignore"):
        return np.abs(m.dz[:, 0]) / np.real(1.0 + m.q2[:, 0]) / frame.chord


def leading_edge_radius(sections: SectionSet, samples: int = 256) -> np.ndarray:
    """Exact leading-edge radius of valid sections, in chords, (B,) (what
    :func:`section_geometry` reports, without the rest)."""
    grid = CircleGrid.get(samples, sections.n_coefficients)
    return _le_radius(sections, chord_frame(sections, map_on_grid(sections, grid), grid))


@dataclass(frozen=True)
class SurfaceSplit:
    """The sampled contour laid out along one increasing key, for batch interpolation.

    The key is u = −x on the upper surface and u = +x on the lower one, with the exact TE
    points (u = ∓1) and LE point (u = 0) included, so that u runs from −1 to 1 along the
    contour of a valid section.  ``monotone`` says whether it does (no fold-over).  ``phi`` is
    the circle angle of every key point, used as the start of Newton's method for exact ordinates.
    """

    key: np.ndarray  # (B, P + 3)
    y: np.ndarray  # (B, P + 3)
    phi: np.ndarray  # (B, P + 3)
    monotone: np.ndarray  # (B,)


def split_surfaces(zc: np.ndarray, phi: np.ndarray, phi_le: np.ndarray) -> SurfaceSplit:
    """Build the interpolation key from chord-frame samples ``zc`` (B, P) at angles ``phi``."""
    nb = zc.shape[0]
    upper = phi[None, :] < phi_le[:, None]
    key = np.where(upper, -zc.real, zc.real)
    ones = np.ones((nb, 1))
    raw = np.concatenate([-ones, key, ones], axis=1)
    monotone = np.all(np.diff(raw, axis=1) > 0, axis=1)
    # insert the exact leading edge (u = 0, y = 0, φ = φ_LE) in order
    full = np.concatenate([raw, 0 * ones], axis=1)
    yfull = np.concatenate([0 * ones, zc.imag, 0 * ones, 0 * ones], axis=1)
    pfull = np.concatenate(
        [0 * ones, np.broadcast_to(phi, zc.shape), 2 * np.pi * ones, phi_le[:, None]], axis=1
    )
    order = np.argsort(full, axis=1, kind="stable")
    take = lambda a: np.take_along_axis(a, order, axis=1)  # noqa: E731
    return SurfaceSplit(take(full), take(yfull), take(pfull), monotone)


def exact_points_at_x(
    sections: SectionSet,
    frame: ChordFrame,
    split: SurfaceSplit,
    keys: np.ndarray,
    iterations: int = 4,
    slopes: bool = False,
    return_phi: bool = False,
):
    """Exact chord-frame contour points at the keys (−x upper, +x lower), shape (B, M).

    Newton's method on x(φ) = x*, dx/dφ = Re(iζ z' · scale), started from the angle
    interpolated between samples (error ~1e-4 rad at 256 samples), converges quadratically:
    two to four steps reach round-off (the trailing edge, where dx/dφ → 0, is the slowest).  With ``slopes=True`` also returns dy/dx there.
    """
    keys = np.broadcast_to(np.asarray(keys, dtype=float), (len(sections),) + np.shape(keys)[-1:])
    phi = interp_rows(keys, split.key, split.phi)
    xt = np.abs(keys)
    m = map_at(sections, np.exp(1j * phi))
    for _ in range(iterations):
        zc = frame.to_chord(m.z)
        dxdphi = np.real(1j * m.zeta * m.dz * frame.scale[:, None])
        with np.errstate(all="ignore"):
            step = (zc.real - xt) / dxdphi
        phi = phi - np.where(np.isfinite(step), np.clip(step, -0.1, 0.1), 0.0)
        m = map_at(sections, np.exp(1j * phi))
    zc = frame.to_chord(m.z)
    if return_phi:
        return zc, phi
    if not slopes:
        return zc
    dzc = m.zeta * m.dz * frame.scale[:, None]  # ∝ tangent (the factor i is applied below)
    with np.errstate(all="ignore"):
        dydx = np.real(dzc) / -np.imag(dzc)  # tangent iζz'·scale = (−Im, Re) of ζz'·scale
    return zc, dydx


def thickness_at(split: SurfaceSplit, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Upper and lower surface ordinates at chord stations ``x`` (M,) or (B, M)."""
    x = np.asarray(x, dtype=float)
    yu = interp_rows(-x, split.key, split.y)
    yl = interp_rows(x, split.key, split.y)
    return yu, yl


def _stations(m: int) -> np.ndarray:
    """Cosine-spaced interior chord stations (excluding 0 and 1)."""
    theta = np.linspace(0.0, np.pi, m + 2)[1:-1]
    return 0.5 * (1.0 - np.cos(theta))


def _hermite_peak(x: np.ndarray, f: np.ndarray, df: np.ndarray):
    """Maximum of f from exact values and slopes at three stations per row, shapes (B, 3).

    The slope's zero is found by linear interpolation on the sub-interval where it changes
    sign, and the value there by the cubic Hermite interpolant: error O(δ⁴) for spacing δ.
    """
    left = df[:, 1] < 0
    xa = np.where(left, x[:, 0], x[:, 1])
    xb = np.where(left, x[:, 1], x[:, 2])
    fa = np.where(left, f[:, 0], f[:, 1])
    fb = np.where(left, f[:, 1], f[:, 2])
    da = np.where(left, df[:, 0], df[:, 1])
    db = np.where(left, df[:, 1], df[:, 2])
    hh = xb - xa
    with np.errstate(all="ignore"):
        xs = xa - da * hh / (db - da)
    good = np.isfinite(xs) & (xs >= xa) & (xs <= xb) & (da >= 0) & (db <= 0)
    xs = np.where(good, xs, x[:, 1])
    t = np.where(good, (xs - xa) / hh, 0.0)
    h00, h10 = 2 * t**3 - 3 * t**2 + 1, t**3 - 2 * t**2 + t
    h01, h11 = -2 * t**3 + 3 * t**2, t**3 - t**2
    fs = h00 * fa + h10 * hh * da + h01 * fb + h11 * hh * db
    return xs, np.where(good, fs, f[:, 1])


def _refine_maxima(sections, frame, split, xs, t, cam_signed, sign):
    """Refine the sampled maxima of thickness and (signed) camber with exact ordinates.

    Exact contour points and slopes dy/dx at the best station and its two neighbours, for both
    quantities in one Newton solve, then :func:`_hermite_peak`.  Returns
    ``(t_x, t_max, c_x, c_max)``.
    """
    m = t.shape[1]
    x3 = []
    for f in (t, cam_signed):
        j = np.clip(np.argmax(f, axis=1), 1, m - 2)
        x3.append(np.stack([xs[j - 1], xs[j], xs[j + 1]], axis=1))
    x6 = np.concatenate(x3, axis=1)
    pts, slope = exact_points_at_x(sections, frame, split, np.concatenate([-x6, x6], axis=1),
                                   iterations=2, slopes=True)
    yu, yl = pts[:, :6].imag, pts[:, 6:].imag
    su, sl = slope[:, :6], slope[:, 6:]
    t_x, t_max = _hermite_peak(x6[:, :3], (yu - yl)[:, :3], (su - sl)[:, :3])
    sg = sign[:, None]
    c_x, c_max = _hermite_peak(
        x6[:, 3:], sg * 0.5 * (yu + yl)[:, 3:], sg * 0.5 * (su + sl)[:, 3:]
    )
    return t_x, t_max, c_x, c_max


@dataclass(frozen=True)
class Geometry:
    """Geometric figures in chords, shapes (B,)."""

    thickness: np.ndarray
    thickness_x: np.ndarray
    camber: np.ndarray
    camber_x: np.ndarray
    le_radius: np.ndarray
    area: np.ndarray


def section_geometry(
    sections: SectionSet,
    mv: MapValues,
    grid: CircleGrid,
    frame: ChordFrame,
    split: SurfaceSplit,
    stations: int = THICKNESS_STATIONS,
    zc: np.ndarray | None = None,
) -> Geometry:
    """Thickness, camber, leading-edge radius and area of each section.

    Thickness and camber are sampled at ``stations`` cosine-spaced chord stations, and their
    maxima refined with exact ordinates (Newton on the map) and parabolic vertices.  The
    leading-edge radius is exact: 1/κ at φ_LE with κ = Re(1 + ζz''/z') / |z'|.  The area is
    ½ ∮ Im(conj(z) dz) by the trapezoidal rule in circle angle (spectrally accurate for a cusped
    trailing edge, algebraically convergent for a finite trailing-edge angle).
    """
    xs = _stations(stations)
    yu, yl = thickness_at(split, xs)
    t = yu - yl
    cam = 0.5 * (yu + yl)
    jc = np.argmax(np.abs(cam), axis=1)
    sign = np.sign(cam[np.arange(len(jc)), jc])
    sign = np.where(sign == 0, 1.0, sign)
    t_x, t_max, c_x, c_abs = _refine_maxima(
        sections, frame, split, xs, t, sign[:, None] * cam, sign
    )
    radius = _le_radius(sections, frame)
    # area: ½ Σ Im(conj(zc) dzc/dφ) Δφ, dzc/dφ = iζ z' · scale
    zc = frame.to_chord(mv.z) if zc is None else zc
    dzc = 1j * mv.zeta * mv.dz * frame.scale[:, None]
    area = 0.5 * np.einsum("bp,bp->b", zc.real, dzc.imag) - 0.5 * np.einsum(
        "bp,bp->b", zc.imag, dzc.real
    )
    area *= grid.step
    return Geometry(t_max, t_x, sign * c_abs, c_x, radius, area)


def coordinates(
    sections: SectionSet,
    frame: ChordFrame,
    split: SurfaceSplit,
    points: int,
    spacing: str = "cosine",
    return_phi: bool = False,
):
    """Chord-frame coordinates from the TE over the upper surface to the LE and back.

    Parameters
    ----------
    points : int
        Total number of points (at least 5); the TE appears first and last.
    spacing : {"cosine", "map"}
        ``cosine``: x = ½(1 − cos θ) on each surface, the LE included exactly, each point exact
        on the contour (:func:`exact_points_at_x`).  ``map``: uniform in circle angle from 0 to
        2π, the map's own spacing, dense where the contour bends.

    Returns
    -------
    ndarray of complex, shape (B, points): x + i y; with ``return_phi`` also the circle angles.
    """
    nb = len(sections)
    if spacing == "map":
        phi = np.linspace(0.0, 2.0 * np.pi, points)[None, :].repeat(nb, axis=0)
        zc = np.empty((nb, points), dtype=complex)
        zc[:, 1:-1] = frame.to_chord(map_at(sections, np.exp(1j * phi[:, 1:-1])).z)
        zc[:, 0] = zc[:, -1] = 1.0
        return (zc, phi) if return_phi else zc
    if spacing != "cosine":
        raise ValueError(f"spacing must be 'cosine' or 'map', not {spacing!r}")
    m_up = (points + 2) // 2  # points per surface including LE and TE
    m_lo = points + 1 - m_up
    xu = 0.5 * (1.0 - np.cos(np.linspace(0.0, np.pi, m_up)))[1:-1]
    xl = 0.5 * (1.0 - np.cos(np.linspace(0.0, np.pi, m_lo)))[1:-1]
    keys = np.concatenate([-xu[::-1], xl])  # upper TE→LE, then lower LE→TE
    zc, phi_in = exact_points_at_x(sections, frame, split, keys, return_phi=True)
    n_up = m_up - 2
    out = np.empty((nb, points), dtype=complex)
    out[:, 0] = 1.0
    out[:, 1 : 1 + n_up] = zc[:, :n_up]
    out[:, 1 + n_up] = 0.0
    out[:, 2 + n_up : -1] = zc[:, n_up:]
    out[:, -1] = 1.0
    if not return_phi:
        return out
    phi = np.empty((nb, points))
    phi[:, 0], phi[:, -1] = 0.0, 2.0 * np.pi
    phi[:, 1 : 1 + n_up] = phi_in[:, :n_up]
    phi[:, 1 + n_up] = frame.phi_le
    phi[:, 2 + n_up : -1] = phi_in[:, n_up:]
    return out, phi


def station_thickness(sections: SectionSet, frame: ChordFrame, split: SurfaceSplit,
                      x: np.ndarray, iterations: int = 4) -> np.ndarray:
    """Exact local thickness y_u − y_l at chord stations ``x`` (M,), shape (B, M): both
    surfaces' exact contour points there (:func:`exact_points_at_x`)."""
    x = np.asarray(x, dtype=float)
    zu = exact_points_at_x(sections, frame, split, -x, iterations=iterations)
    zl = exact_points_at_x(sections, frame, split, x, iterations=iterations)
    return zu.imag - zl.imag


def thickness_floor(x: np.ndarray, t0: float) -> np.ndarray:
    """The local-thickness floor at chord stations ``x``: t₀ min(1, x/0.05, ((1 − x)/0.2)²)
    (the compiled kernel's :func:`~foilmap.section._kfloor.floor_at`, whose constants it
    reads)."""
    x = np.asarray(x, dtype=float)
    w = (1.0 - x) / (1.0 - FLOOR_TAPER)
    return t0 * np.minimum(np.minimum(1.0, x / FLOOR_NOSE), w * w)


def floor_clearance(sections: SectionSet, t0: float, samples: int = 256
                    ) -> tuple[np.ndarray, np.ndarray]:
    """How far each valid section's local thickness stays above the floor t₀ at the floor's
    exact stations: ``(least thickness − floor, its station x/c)``, shapes (B,), NaN where the
    section is invalid (exact contour points; the search's ``floor_margin`` figure)."""
    from foilmap.section import _compiled as C

    grid = CircleGrid.get(samples, max(sections.n_coefficients, 1))
    mv = map_on_grid(sections, grid)
    frame = chord_frame(sections, mv, grid)
    split = split_surfaces(frame.to_chord(mv.z), grid.phi, frame.phi_le)
    xs = C.floor_stations()[:FLOOR_STATIONS]  # the design stations (without the tail)
    with np.errstate(all="ignore"):
        t = station_thickness(sections, frame, split, xs, iterations=8)
    m = t - thickness_floor(xs, t0)[None, :]
    j = np.nanargmin(np.where(np.isfinite(m), m, np.inf), axis=1)
    rows = np.arange(len(sections))
    return m[rows, j], xs[j]
