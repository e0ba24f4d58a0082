"""The inverse design for people: a summary record, and the figure of target and achieved Cp
over the section."""

from __future__ import annotations

import math

import numpy as np

from foilmap.report.text import CAUTION, display_values

__all__ = ["inverse_record", "inverse_figure", "format_inverse"]


def inverse_record(res, name: str) -> dict:
    """JSON-ready figures of an :class:`~foilmap.section.inverse.InverseSection`."""
    d = res.design
    worst, wx, wup = res.worst
    t = d.target
    covered = {}
    for side, up in (("upper", True), ("lower", False)):
        xs = t.x[t.upper == up]
        covered[side] = None if xs.size == 0 else [float(xs.min()), float(xs.max())]
    given_closure = np.abs(d.closure_dlnq[d.covered]) if d.covered.any() else np.zeros(1)
    free_closure = np.abs(d.closure_dlnq[~d.covered]) if (~d.covered).any() else np.zeros(1)
    return display_values({
        "name": name,
        "cl": res.cl,
        "alpha_deg": math.degrees(res.alpha),
        "te_angle_deg": math.degrees(d.te_angle),
        "target_points": int(t.x.size),
        "target_covers": covered,
        "rms_cp_deviation": res.rms_deviation,
        "max_cp_deviation": worst,
        "max_cp_deviation_at": {"x": wx, "surface": "upper" if wup else "lower"},
        "closure_change_given_max_dlnq": float(given_closure.max()),
        "closure_change_free_max_dlnq": float(free_closure.max()),
        "iterations": d.iterations,
        "converged": d.converged,
        "contour_gap": d.gap,
        "fit_coefficients": int(len(res.fit.coefficients)),
        "fit_max_deviation": res.fit.max_deviation,
        "fit_rms_deviation": res.fit.rms_deviation,
        "trailing_edge_zone_from_x": 0.99,
        "caution": CAUTION,
    })


def inverse_figure(res, name: str):
    """A Figure: target and achieved Cp against x/c above the section, on one chord axis."""
    from matplotlib.figure import Figure

    d = res.design
    t = d.target
    fig = Figure(figsize=(8.5, 7.0))
    gs = fig.add_gridspec(2, 1, height_ratios=(3.0, 1.2), hspace=0.08)
    ax_p = fig.add_subplot(gs[0])
    ax_s = fig.add_subplot(gs[1], sharex=ax_p)
    ink, target_col = "#1b4f72", "#ca6f1e"
    for up, label in ((True, "upper"), (False, "lower")):
        m = t.upper == up
        if not m.any():
            continue
        o = np.argsort(t.x[m])
        ax_p.plot(t.x[m][o], t.cp[m][o], "o" if up else "s", ms=3.2, mfc="none",
                  color=target_col, label=f"target, {label}")
        ax_p.plot(t.x[m][o], res.achieved_cp[m][o], "-", lw=1.4,
                  color=ink if up else "#5d6d7e", label=f"achieved, {label}")
    ax_p.invert_yaxis()
    ax_p.set_ylabel("Cp")
    ax_p.grid(True, color="0.9")
    ax_p.legend(fontsize=8, frameon=False, ncol=2, loc="lower right")
    worst, wx, wup = res.worst
    ax_p.set_title(f"{name}: inverse design at Cl {res.cl:.3f}, alpha "
                   f"{math.degrees(res.alpha):.2f} deg — Cp RMS deviation "
                   f"{res.rms_deviation:.2g}, largest {worst:.2g} at x/c {wx:.3f} "
                   f"({'upper' if wup else 'lower'})", fontsize=9)
    plt_xy = d.xy
    ax_s.plot(plt_xy[:, 0], plt_xy[:, 1], "-", color=ink, lw=1.3)
    ax_s.set_aspect("equal", adjustable="datalim")
    ax_s.set_xlabel("x / chord")
    ax_s.set_ylabel("y / chord")
    ax_s.grid(True, color="0.9")
    ax_p.tick_params(labelbottom=True)
    ax_p.set_xlabel("x / chord")
    fig.text(0.5, 0.01, CAUTION, ha="center", fontsize=6.5, color="0.3", wrap=True)
    fig.subplots_adjust(left=0.1, right=0.97, top=0.93, bottom=0.1)
    return fig


def format_inverse(rec: dict, target: str, output: str) -> str:
    """The text of ``foilmap inverse`` from its record."""
    cov = ", ".join(f"{s} x/c {v[0]:.3f} to {v[1]:.3f}" for s, v in rec["target_covers"].items()
                    if v is not None)
    return "\n".join([
        f"target {target}: {rec['target_points']} points ({cov})",
        f"inverse design at Cl {rec['cl']:.4f}, alpha {rec['alpha_deg']:.3f} deg, trailing-edge "
        f"angle {rec['te_angle_deg']:.2f} deg; {rec['iterations']} iterations"
        + ("" if rec["converged"] else " (stopped at the iteration limit)"),
        f"achieved Cp against the target: RMS deviation {rec['rms_cp_deviation']:.2g}, "
        f"largest {rec['max_cp_deviation']:.2g} at x/c "
        f"{rec['max_cp_deviation_at']['x']:.3f} ({rec['max_cp_deviation_at']['surface']})",
        f"closure: ln q changed by up to {rec['closure_change_given_max_dlnq']:.2g} where the "
        f"target is given, {rec['closure_change_free_max_dlnq']:.2g} on the free part; "
        f"stations beyond x/c 0.99 (the trailing-edge stagnation) are not matched",
        f"fitted with {rec['fit_coefficients']} coefficients: deviation max "
        f"{rec['fit_max_deviation']:.2e}, RMS {rec['fit_rms_deviation']:.2e} chords; section "
        f"written to {output}",
        CAUTION])
