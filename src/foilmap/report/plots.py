"""Figures: the section with its streamlines and its Cp distribution.

matplotlib is imported here only, with the non-interactive Agg back end.
"""

from __future__ import annotations

import math
import os

import numpy as np

from foilmap.report.text import CAUTION
from foilmap.section.conformal import map_at
from foilmap.section.evaluation import Analysis, surface_distribution

__all__ = ["streamfunction_grid", "plot_section", "section_figure", "plot_fit", "fit_figure"]


def streamfunction_grid(analysis: Analysis, i: int = 0, radial: int = 90, angular: int = 361,
                        extent: float = 3.0):
    """Stream function on a polar grid of the circle plane, mapped to the chord frame.

    ψ = Im W(ζ), W = U (e^{−iα'} ζ + e^{iα'}/ζ) + iΓ/(2π) log ζ, so the body is ψ = 0 and
    ψ = U Im(e^{−iα'}ζ + e^{iα'}/ζ) + Γ/(2π) ln|ζ|: single-valued, exact.  Radii are
    geometrically spaced from 1 to ``extent`` so that the grid is fine near the body.

    Returns ``(x, y, psi)``, each of shape (radial, angular), in chords.
    """
    sec = analysis.sections[i]
    fl, fr = analysis.flow, analysis.frame
    r = np.geomspace(1.0, extent, radial)
    phi = np.linspace(0.0, 2.0 * np.pi, angular)
    zeta = (r[:, None] * np.exp(1j * phi[None, :])).ravel()
    zeta = np.where(np.abs(zeta - 1.0) < 1e-12, 1.0 + 1e-9, zeta)  # avoid the TE itself
    z = map_at(sec, zeta[None, :]).z[0]
    zc = (z - fr.z_le[i]) * fr.scale[i]
    ap, u, gam = fl.alpha_circle[i], fl.speed[i], fl.circulation[i]
    w = u * (np.exp(-1j * ap) * zeta + np.exp(1j * ap) / zeta)
    psi = w.imag + gam / (2.0 * np.pi) * np.log(np.abs(zeta))
    shape = (radial, angular)
    return zc.real.reshape(shape), zc.imag.reshape(shape), psi.reshape(shape)


def plot_section(analysis: Analysis, path: str | os.PathLike, name: str = "section",
                 i: int = 0, points: int = 241) -> None:
    """Write a PNG: Cp along the chord (axis inverted) above the section in its streamlines."""
    section_figure(analysis, name, i, points).savefig(path, dpi=130)


def section_figure(analysis: Analysis, name: str = "section", i: int = 0, points: int = 241):
    """The figure of :func:`plot_section`: Cp over the section on one chord axis (a matplotlib
    ``Figure``; the caller's pyplot state and backend are untouched)."""
    from matplotlib.figure import Figure

    ev = analysis.evaluation
    zc, upper, q = surface_distribution(analysis, points, "cosine")
    zc, upper, q = zc[i], upper[i], q[i]
    cp = 1.0 - q * q
    fig = Figure(figsize=(8.0, 8.2))
    ax_cp, ax_sec = fig.subplots(
        2, 1, gridspec_kw={"height_ratios": [1.05, 1.0]}, sharex=True
    )
    ax_cp.plot(zc.real[upper], cp[upper], color="#b03a2e", lw=1.8, label="upper surface")
    ax_cp.plot(zc.real[~upper], cp[~upper], color="#1f618d", lw=1.8, label="lower surface")
    ax_cp.axhline(0.0, color="0.6", lw=0.7)
    ax_cp.invert_yaxis()
    ax_cp.set_ylabel("Cp")
    ax_cp.grid(True, color="0.9")
    ax_cp.legend(loc="upper right", frameon=False)
    ax_cp.tick_params(labelbottom=True)  # the chord axis is shared: label it on both plots
    if ev.te_angle[i] > 0:  # Cp → 1 at a finite-angle edge is the ideal flow, not a fault
        ax_cp.annotate("ideal-flow stagnation\nat the trailing edge", xy=(1.0, 1.0),
                       xytext=(0.82, 0.72), fontsize=7.5, color="0.35", ha="right",
                       arrowprops={"arrowstyle": "->", "color": "0.5", "lw": 0.7})
    cl, alpha = ev.cl[i], math.degrees(ev.alpha[i])
    ax_cp.set_title(
        f"{name}:  Cl = {cl:.3f} at {alpha:.2f}°,  Cp min = {ev.cp_min[i]:.3f} "
        f"at x/c = {ev.cp_min_x[i]:.3f},  Cm c/4 = {ev.cm_quarter_chord[i]:.4f}",
        fontsize=10,
    )
    x, y, psi = streamfunction_grid(analysis, i)
    span = np.nanpercentile(np.abs(psi), 60)
    levels = np.linspace(-span, span, 31)
    ax_sec.contour(x, y, psi, levels=levels, colors="#7f8c8d", linewidths=0.6, linestyles="solid")
    ax_sec.fill(zc.real, zc.imag, color="#d5d8dc", ec="#17202a", lw=1.2)
    # equal scales by adjusting the y range, so that both plots span the same chord axis and the
    # suction peak sits over its place on the section
    ax_sec.set_xlim(-0.3, 1.3)
    ax_sec.set_aspect("equal", adjustable="datalim")
    ax_sec.set_xlabel("x / chord")
    ax_sec.set_ylabel("y / chord")
    ax_sec.set_title(
        f"t/c = {ev.thickness[i]:.4f} at {ev.thickness_x[i]:.3f},  "
        f"camber = {ev.camber[i]:.4f} at {ev.camber_x[i]:.3f}; streamlines of the exact flow",
        fontsize=9,
    )
    fig.text(0.5, 0.01, CAUTION, ha="center", va="bottom", fontsize=6.5, wrap=True, color="0.3")
    fig.tight_layout(rect=(0, 0.04, 1, 1))
    return fig


def plot_fit(coords, fit, path) -> None:
    """Write :func:`fit_figure` to ``path`` (PNG)."""
    fit_figure(coords, fit).savefig(path, dpi=120)


def fit_figure(coords, fit):
    """A Figure: given and fitted contours overlaid, and the deviation along the chord."""
    from matplotlib.figure import Figure

    from foilmap.section.fitting import dense_reference

    ref = dense_reference(coords.xy, coords.le_index)
    fx, fy = fit.fitted_xy[:, 0], fit.fitted_xy[:, 1]
    fig = Figure(figsize=(8.0, 6.5))
    ax, axd = fig.subplots(2, 1, sharex=True,
                                  gridspec_kw={"height_ratios": [1.2, 1.0]})
    ax.plot(coords.xy[:, 0], coords.xy[:, 1], "o", ms=2.5, color="#1f618d", label="given points")
    ax.plot(fx, fy, "-", lw=1.0, color="#b03a2e", label=f"map, N = {len(fit.coefficients)}")
    ax.set_aspect("equal")
    ax.legend(frameon=False, fontsize=8)
    ax.set_ylabel("y / chord")
    ax.set_title(f"{coords.name}: conformal fit, max deviation {fit.max_deviation:.2e} chords",
                 fontsize=10)
    # distance from each fitted point to the given contour, along the chord on each surface
    from foilmap.section.fitting import contour_distances

    dist = contour_distances(fit.fitted_xy, ref)
    le = int(np.argmin(np.hypot(fx, fy)))
    axd.semilogy(fx[: le + 1], np.maximum(dist[: le + 1], 1e-12), lw=1.0, color="#b03a2e",
                 label="upper")
    axd.semilogy(fx[le:], np.maximum(dist[le:], 1e-12), lw=1.0, color="#1f618d", label="lower")
    axd.set_ylim(bottom=max(1e-10, 1e-4 * float(dist.max())))
    axd.set_xlabel("x / chord")
    axd.set_ylabel("distance to the given contour, chords")
    axd.legend(frameon=False, fontsize=8)
    axd.grid(True, color="0.9")
    fig.text(0.5, 0.01, CAUTION, ha="center", fontsize=6, color="0.3", wrap=True)
    fig.tight_layout(rect=(0, 0.04, 1, 1))
    return fig
