"""A plain panel method, the independent peer of the conformal kernel.

Constant-strength source panels with one vortex strength shared by all panels and the Kutta
condition of equal tangential speeds on the two trailing-edge panels (the Hess–Smith
formulation: Hess & Smith, Prog. Aero. Sci. 8, 1967; Katz & Plotkin, Low-Speed Aerodynamics,
§11.2).  Written with complex potentials: a panel from z₁ to z₂ at angle θ with unit source
strength induces u − iv = −(1/2π) e^{−iθ} log((z − z₂)/(z − z₁)); a unit vortex sheet
(clockwise positive, the sense that lifts) induces i times that.  Vectorised over a batch of sections with
the same number of panels.

Used by the tests (convergence to the exact solution as panels are added) and by the
benchmark (throughput ratio).  Not part of the foilmap package.
"""

from __future__ import annotations

import numpy as np

__all__ = ["panel_solve"]


def panel_solve(x: np.ndarray, y: np.ndarray, alpha: float | np.ndarray):
    """Solve the flow past closed sections given by nodes.

    Parameters
    ----------
    x, y : ndarray, shape (B, n + 1)
        Node coordinates in chords, from the trailing edge over the upper surface to the leading
        edge and back (the foilmap coordinates layout); first and last nodes coincide.
    alpha : float or ndarray (B,)
        Angle of attack in radians.

    Returns
    -------
    dict with ``cl`` (from the circulation, shape (B,)), ``cl_pressure`` (from pressure
    integration), ``xc``, ``yc`` (collocation points, (B, n)), ``cp`` ((B, n)), ``vt``
    (tangential speed, (B, n), positive in the node order given).
    """
    x = np.atleast_2d(x)[:, ::-1]  # clockwise order: lower TE → LE → upper TE
    y = np.atleast_2d(y)[:, ::-1]
    nb, m = x.shape
    n = m - 1
    alpha = np.broadcast_to(np.asarray(alpha, dtype=float), (nb,))
    z = x + 1j * y
    z1, z2 = z[:, :-1], z[:, 1:]
    dz = z2 - z1
    length = np.abs(dz)
    e_t = dz / length  # unit tangent e^{iθ}
    e_n = 1j * e_t  # outward normal (fluid on the left of a clockwise traverse)
    zc = 0.5 * (z1 + z2)
    # log((z_i − z₂ⱼ)/(z_i − z₁ⱼ)) for every collocation point i and panel j
    with np.errstate(all="ignore"):
        lg = np.log((zc[:, :, None] - z2[:, None, :]) / (zc[:, :, None] - z1[:, None, :]))
    idx = np.arange(n)
    lg[:, idx, idx] = 1j * np.pi  # self-influence, limit from the fluid side
    w_src = -(1.0 / (2.0 * np.pi)) * np.conj(e_t)[:, None, :] * lg  # u − iv per unit source
    w_vor = 1j * w_src  # per unit vortex sheet, clockwise positive (point vortex: +iΓ/(2πz))
    v_src = np.conj(w_src)  # u + iv
    v_vor = np.conj(w_vor)

    def comp(v, e):  # component of velocity v along unit vector e at each collocation point
        return np.real(v * np.conj(e)[:, :, None])

    an = comp(v_src, e_n)  # (B, n, n)
    bn = comp(v_vor, e_n).sum(axis=2)  # (B, n): shared vortex strength
    at = comp(v_src, e_t)
    bt = comp(v_vor, e_t).sum(axis=2)
    vinf = np.exp(1j * alpha)[:, None]
    rhs_n = -np.real(vinf * np.conj(e_n))
    vinf_t = np.real(vinf * np.conj(e_t))
    mat = np.zeros((nb, n + 1, n + 1))
    rhs = np.zeros((nb, n + 1))
    mat[:, :n, :n] = an
    mat[:, :n, n] = bn
    rhs[:, :n] = rhs_n
    # Kutta: tangential speeds on the first and last panels sum to zero
    mat[:, n, :n] = at[:, 0, :] + at[:, -1, :]
    mat[:, n, n] = bt[:, 0] + bt[:, -1]
    rhs[:, n] = -(vinf_t[:, 0] + vinf_t[:, -1])
    sol = np.linalg.solve(mat, rhs[..., None])[..., 0]
    sigma, gam = sol[:, :n], sol[:, n]
    vt = np.einsum("bij,bj->bi", at, sigma) + bt * gam[:, None] + vinf_t
    cp = 1.0 - vt**2
    circulation_cw = gam * length.sum(axis=1)  # clockwise circulation of the sheet
    cl = 2.0 * circulation_cw  # chord 1
    # pressure integration: force = i ∮ Cp dz over the clockwise contour, sign reversed
    force = -1j * np.sum(cp * dz, axis=1)
    cl_p = np.imag(force * np.exp(-1j * alpha))
    out = {
        "cl": cl,
        "cl_pressure": cl_p,
        "xc": zc.real[:, ::-1],
        "yc": zc.imag[:, ::-1],
        "cp": cp[:, ::-1],
        "vt": -vt[:, ::-1],
    }
    return out
