"""Surface distributions from the stagnation point, the input of the boundary-layer proxies.

The front stagnation point is at φ_s = π + 2α' on the circle.  The upper surface runs from it
through decreasing φ to the trailing edge (φ = 0), the lower one through increasing φ to 2π.
Each surface is laid out as a (B, P) array in flow order with a mask for padding, so that the
ragged lengths of a batch need no loop.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from foilmap.section.conformal import CircleGrid, MapValues
from foilmap.section.flow import FlowState, speed_log_derivative
from foilmap.section.geometry import ChordFrame

__all__ = ["Surface", "surfaces_from_stagnation"]


@dataclass(frozen=True)
class Surface:
    """One surface in flow order from the stagnation point, arrays (B, P).

    Attributes
    ----------
    s : arc length from the stagnation point, chords
    u : speed ratio q/V∞
    du_ds : analytic gradient du/ds, per chord
    x, y : chord-frame position
    phi : circle angle
    mask : True for the points of this surface (a contiguous block of each row)
    integral0 : ∫ u⁵ ds from the stagnation point to the first point (u ∝ s there), shape (B,)
    """

    s: np.ndarray
    u: np.ndarray
    du_ds: np.ndarray
    x: np.ndarray
    y: np.ndarray
    phi: np.ndarray
    mask: np.ndarray
    integral0: np.ndarray
    s_te: np.ndarray  # arc length from the stagnation point to the trailing edge, (B,)

    def end_state(self, mask: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Arc length and speed at the last point of ``mask`` in each row, shapes (B,)."""
        nb, p = mask.shape
        last = p - 1 - np.argmax(mask[:, ::-1], axis=1)
        r = np.arange(nb)
        return self.s[r, last], self.u[r, last]

    def until(self, x_end: float) -> np.ndarray:
        """Mask of the points before the surface first passes the chord station ``x_end``."""
        past = self.mask & (self.x > x_end)
        return self.mask & (np.cumsum(past, axis=1) == 0)


def surfaces_from_stagnation(
    flow: FlowState, mv: MapValues, grid: CircleGrid, frame: ChordFrame, q: np.ndarray
) -> tuple[Surface, Surface]:
    """Upper and lower surfaces (in that order) from the grid samples.

    No gathers: the lower surface is the grid in its own order, masked before φ_s; the upper one
    is the grid reversed (a view), masked after φ_s.  Arc length from the stagnation point is the
    difference of one cumulative arc length S(φ), with S(φ_s) interpolated on the uniform grid.
    """
    nb, p = q.shape
    h = grid.step
    phi_s = np.mod(np.pi + 2.0 * flow.alpha_circle, 2.0 * np.pi)
    phi_s = np.where(np.isfinite(phi_s), phi_s, np.pi)
    ds_dphi = np.abs(mv.dz)
    ds_dphi /= frame.chord[:, None]
    # S(φⱼ): arc length from the TE (φ = 0) by trapezoids, the first half step as a rectangle
    arc = np.cumsum(ds_dphi, axis=1)
    arc -= 0.5 * ds_dphi
    arc -= 0.5 * ds_dphi[:, :1]
    arc *= h
    pos = phi_s / h - 0.5  # fractional grid index of φ_s
    j0 = np.clip(np.floor(pos).astype(int), 0, p - 2)
    frac = np.clip(pos - j0, 0.0, 1.0)
    r = np.arange(nb)
    arc_s = arc[r, j0] + frac * (arc[r, j0 + 1] - arc[r, j0])
    lower_mask = grid.phi[None, :] > phi_s[:, None]
    s_signed = arc - arc_s[:, None]
    arc_total = arc[:, -1] + 0.5 * h * ds_dphi[:, -1]  # to φ = 2π
    dlnq = speed_log_derivative(grid.phi, flow.alpha_circle[:, None], mv.q2, grid)
    grad = q * dlnq / ds_dphi  # dq/ds along increasing φ
    zc = frame.to_chord(mv.z)
    x, y = zc.real, zc.imag
    j_first = np.clip(j0 + (frac > 0), 0, p - 1)  # first lower index
    j_first = np.where(grid.phi[j_first] > phi_s, j_first, np.minimum(j_first + 1, p - 1))
    out = []
    for direction in (-1, 1):
        if direction < 0:
            rev = np.s_[:, ::-1]
            mask = ~lower_mask[rev]
            jf = np.clip(j_first - 1, 0, p - 1)
            ss = -s_signed[rev]
            uu, du, xx, yy, pp = q[rev], -grad[rev], x[rev], y[rev], grid.phi[::-1]
        else:
            mask = lower_mask
            jf = j_first
            ss, uu, du, xx, yy, pp = s_signed, q, grad, x, y, grid.phi
        s_first = np.abs(s_signed[r, jf])
        integral0 = q[r, jf] ** 5 * s_first / 6.0
        s_te = arc_s if direction < 0 else arc_total - arc_s
        out.append(
            Surface(ss, uu, du, xx, yy, np.broadcast_to(pp, q.shape), mask, integral0, s_te)
        )
    return out[0], out[1]
