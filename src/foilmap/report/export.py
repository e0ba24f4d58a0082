"""Hand-off bundles for viscous analysis: one folder per design, one summary for the export.

Each design folder holds::

    coordinates.dat        name line, then x y (TE → upper → LE → lower → TE), chords
    surface-clX.XXX.csv    per Cl (design point and the ends of any Cl range): x, y, surface,
                           cp, q, s, dq_ds, falkner_skan_m, thwaites_lambda along each surface
                           from the stagnation point
    design.json            coefficients, angles, operating point, objectives, constraints and
                           margins, provenance (run log and evaluation), software version
    section.png            the section and its Cp distribution
    mesh.msh               with --mesh (needs the gmsh extra): a 2-D mesh around the section

A finite trailing-edge thickness T can be added by a linear thickness blend: the upper surface
moves by +(T/2)·x and the lower by −(T/2)·x (common practice; the leading edge does not move and
no point moves by more than T/2).  Every file states that these are ideal-flow screening results.
"""

from __future__ import annotations

import csv
import io
import json
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from foilmap._version import __version__
from foilmap.errors import InputError
from foilmap.report.text import CAUTION, CONVENTIONS, xy_lines
from foilmap.section.conformal import SectionSet, map_at
from foilmap.section.evaluation import analyse
from foilmap.section.geometry import coordinates
from foilmap.store.sectionfile import write_text_atomic

__all__ = ["Design", "export_designs", "resample", "add_te_thickness", "SPACINGS"]

SPACINGS = ("cosine", "map", "curvature")
#: surface-table rows beyond this chord station are the trailing-edge zone (see the table)
TE_ZONE_X = 0.99


@dataclass
class Design:
    """One design to export."""

    name: str
    section: SectionSet  # a batch of one
    cl: float | None = None  # design Cl (None: use alpha)
    alpha: float | None = None  # radians
    cl_range: tuple[float, float] | None = None
    reynolds: float | None = None
    objectives: dict = field(default_factory=dict)
    constraints: dict = field(default_factory=dict)  # name → {"value", "margin"}
    provenance: dict = field(default_factory=dict)
    #: a fitted section's source chord line (angles, Cl and Cm measured from it), or None
    reference_le: complex | None = None

    @classmethod
    def from_folder_design(cls, d, cl: float | None = None, alpha: float | None = None,
                           reynolds: float | None = None) -> "Design":
        """A logged design of a study folder (:class:`~foilmap.design.results.FolderDesign`),
        at its run's design Cl (and Cl range) unless ``cl`` or ``alpha`` (radians) is given."""
        spec = d.run
        cl = cl if cl is not None else (None if alpha is not None else spec.point.cl)
        return cls(name=f"{d.run_id}-{d.evaluation}", section=d.section, cl=cl, alpha=alpha,
                   cl_range=spec.point.cl_range if cl == spec.point.cl else None,
                   reynolds=reynolds if reynolds is not None else spec.point.reynolds,
                   objectives=dict(d.objectives),
                   constraints={n: {"value_g": v, "margin": -v, "met": bool(v <= 0)}
                                for n, v in d.constraints.items()},
                   provenance={k: v for k, v in d.provenance().items()
                               if k not in ("objective", "design_cl")})


def resample(section: SectionSet, analysis, points: int, spacing: str) -> np.ndarray:
    """Chord-frame points of one section, (points, 2), in the coordinates layout.

    ``curvature``: on each surface (the LE included exactly) a density proportional to
    0.25 + √(κ·c) along the arc (κ the exact curvature from the map), so that the nose and any
    tight feature get more points; each point is on the exact contour.
    """
    if spacing in ("cosine", "map"):
        zc = coordinates(section, analysis.frame, analysis.split, points, spacing)[0]
        return np.column_stack([zc.real, zc.imag])
    if spacing != "curvature":
        raise InputError(f"spacing {spacing!r} is not one of {', '.join(SPACINGS)}")
    fine = 8192
    phi_le = float(analysis.frame.phi_le[0])
    chord = analysis.frame.chord[0]
    m_up = (points + 2) // 2  # points per surface, LE and TE included, as for cosine spacing
    m_lo = points + 1 - m_up
    parts = []
    for a, b, n in ((0.0, phi_le, m_up), (phi_le, 2 * np.pi, m_lo)):
        phi = np.linspace(a, b, fine + 1)
        mid = 0.5 * (phi[1:] + phi[:-1])
        m = map_at(section, np.exp(1j * mid)[None, :])
        ds = np.abs(m.dz[0]) / chord * np.diff(phi)
        kappa = np.abs(np.real(1.0 + m.q2[0])) / np.abs(m.dz[0]) * chord
        cum = np.concatenate([[0.0], np.cumsum(ds * (0.25 + np.sqrt(kappa)))])
        parts.append(np.interp(np.linspace(0.0, cum[-1], n), cum, phi))
    phi_t = np.concatenate([parts[0], parts[1][1:]])
    z = analysis.frame.to_chord(map_at(section, np.exp(1j * phi_t[1:-1])[None, :]).z)[0]
    out = np.empty((points, 2))
    out[0] = out[-1] = (1.0, 0.0)
    out[1:-1, 0], out[1:-1, 1] = z.real, z.imag
    out[m_up - 1] = (0.0, 0.0)  # the leading edge exactly
    return out


def add_te_thickness(xy: np.ndarray, thickness: float) -> tuple[np.ndarray, float]:
    """Open the trailing edge to ``thickness`` chords by the linear blend; returns the points and
    the largest distance a point moved."""
    if thickness <= 0:
        return xy, 0.0
    le = int(np.argmin(np.hypot(xy[:, 0], xy[:, 1])))
    out = xy.copy()
    out[:le, 1] += 0.5 * thickness * xy[:le, 0]
    out[le + 1 :, 1] -= 0.5 * thickness * xy[le + 1 :, 0]
    return out, float(np.max(np.abs(out[:, 1] - xy[:, 1])))


def _surface_table(analysis) -> str:
    """Distributions along both surfaces from the stagnation point, as CSV text."""
    from foilmap.section.evaluation import surfaces_on_grid
    from foilmap.section.proxies import thwaites

    buf = io.StringIO()
    buf.write(f"# foilmap surface distributions at Cl {analysis.evaluation.cl[0]:.4f}, "
              f"alpha {math.degrees(analysis.evaluation.alpha[0]):.4f} deg\n")
    buf.write(f"# {CONVENTIONS}\n# s: arc length from the stagnation point (chords); "
              "falkner_skan_m = (s/q) dq/ds; thwaites_lambda Reynolds-free\n")
    buf.write(f"# te_zone = 1: within {1 - TE_ZONE_X:g} chord of the trailing edge, where the "
              "ideal flow stagnates at a finite-angle edge and dq/ds, m and lambda are left "
              "empty (they grow without bound there and mean nothing for a real layer)\n")
    buf.write(f"# {CAUTION}\n")
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["x", "y", "surface", "cp", "q", "s", "dq_ds", "falkner_skan_m",
                "thwaites_lambda", "te_zone"])
    upper, lower = surfaces_on_grid(analysis, 512)
    for name, sf, rev in (("upper", upper, True), ("lower", lower, False)):
        lam = thwaites(sf.s, sf.u, sf.du_ds, sf.mask, sf.integral0).lam[0]
        idx = np.flatnonzero(sf.mask[0])
        if rev:
            idx = idx[::-1]
        for i in idx:
            u, s = sf.u[0, i], sf.s[0, i]
            m = s / u * sf.du_ds[0, i] if u > 0 else float("nan")
            row = [f"{sf.x[0, i]:.8f}", f"{sf.y[0, i]:.8f}", name, f"{1 - u * u:.8f}",
                   f"{u:.8f}", f"{s:.8f}"]
            if sf.x[0, i] > TE_ZONE_X:
                w.writerow(row + ["", "", "", 1])
            else:
                w.writerow(row + [f"{sf.du_ds[0, i]:.6e}", f"{m:.6e}", f"{lam[i]:.6e}", 0])
    return buf.getvalue()


def _safe(name: str) -> str:
    return "".join(c if c.isalnum() or c in "-_." else "_" for c in name)[:80] or "design"


def export_designs(designs: list[Design], out: Path, *, points: int = 201,
                   spacing: str = "cosine", te_thickness: float = 0.0, mesh: bool = False,
                   farfield: float = 20.0, first_cell: float = 1e-5, progress=None
                   ) -> list[dict]:
    """Write one folder per design and ``summary.csv``; returns the summary rows.

    ``progress``, if given, has ``step()`` (called after each design) and ``close()``.
    """
    from foilmap.report.plots import plot_section
    from foilmap.section.screening import screen_analysis

    out = Path(out)
    if spacing not in SPACINGS:
        raise InputError(f"spacing {spacing!r} is not one of {', '.join(SPACINGS)}")
    if mesh:
        from foilmap.report.mesh import check_gmsh

        check_gmsh()
    out.mkdir(parents=True, exist_ok=True)
    rows = []
    used = set()
    for d in designs:
        kw = {"cl": d.cl} if d.cl is not None else {"alpha": d.alpha}
        an = analyse(d.section, **kw, proxies=("severity", "thwaites"),
                     reference_le=d.reference_le)
        ev = an.evaluation
        if ev.status[0] != 0:
            from foilmap.section.status import describe

            raise InputError(f"design {d.name!r} cannot be exported: {describe(ev.status[0])}")
        folder_name = _safe(d.name)
        while folder_name in used:
            folder_name += "_"
        used.add(folder_name)
        folder = out / folder_name
        folder.mkdir(exist_ok=True)
        xy = resample(d.section, an, points, spacing)
        xy, moved = add_te_thickness(xy, te_thickness)
        edge = (f"trailing edge {te_thickness:g} chords thick" if te_thickness > 0
                else "closed trailing edge")
        write_text_atomic(folder / "coordinates.dat",
                          f"{d.name}  ({edge}; foilmap ideal-flow screening section, verify by "
                          f"viscous analysis and tests)\n" + xy_lines(xy[:, 0], xy[:, 1]) + "\n")
        cls = [float(ev.cl[0])]
        if d.cl_range is not None:
            cls += [float(c) for c in d.cl_range]
        tables = []
        for c in cls:
            an_c = an if c == cls[0] else analyse(d.section, cl=c, proxies=(),
                                                  reference_le=d.reference_le)
            if an_c.evaluation.status[0] != 0:
                continue
            fname = f"surface-cl{c:.3f}.csv"
            write_text_atomic(folder / fname, _surface_table(an_c))
            tables.append(fname)
        screen = None
        if d.reynolds is not None:
            screen = screen_analysis(an, d.reynolds).record(0)
        rec = {
            "name": d.name,
            "cl": float(ev.cl[0]),
            "alpha_deg": math.degrees(ev.alpha[0]),
            "design_cl": d.cl,
            "cl_range": list(d.cl_range) if d.cl_range else None,
            "reynolds": d.reynolds,
            "te_angle_deg": math.degrees(d.section.te_angle[0]),
            "coefficients": [[float(a.real), float(a.imag)] for a in d.section.coefficients[0]],
            "cp_min": float(ev.cp_min[0]),
            "cp_min_x": float(ev.cp_min_x[0]),
            "cm_quarter_chord": float(ev.cm_quarter_chord[0]),
            "thickness": float(ev.thickness[0]),
            "camber": float(ev.camber[0]),
            "le_radius": float(ev.le_radius[0]),
            "recovery_severity": float(ev.severity[0]),
            "objectives": d.objectives,
            "constraints": d.constraints,
            "screening": screen,
            "coordinates": {"file": "coordinates.dat", "points": points, "spacing": spacing,
                            "te_thickness": te_thickness, "largest_shift_by_te_blend": moved},
            "surface_tables": tables,
            "provenance": d.provenance,
            "software": f"foilmap {__version__}",
            "conventions": CONVENTIONS,
            "caution": CAUTION,
        }
        write_text_atomic(folder / "design.json", json.dumps(rec, indent=1))
        tmp = folder / ".section.part.png"
        plot_section(an, tmp, d.name)
        tmp.replace(folder / "section.png")
        if mesh:
            from foilmap.report.mesh import write_mesh

            write_mesh(xy, folder / "mesh.msh", farfield=farfield, first_cell=first_cell)
        if progress is not None:
            progress.step()
        rows.append({"design": d.name, "folder": folder_name, "cl": rec["cl"],
                     "alpha_deg": rec["alpha_deg"], "cp_min": rec["cp_min"],
                     "cm_quarter_chord": rec["cm_quarter_chord"], "thickness": rec["thickness"],
                     "cd_screening": None if screen is None else screen["cd"],
                     **{f"objective_{k}": v for k, v in d.objectives.items()},
                     "source": d.provenance.get("log", d.provenance.get("file", ""))})
    keys = []
    for r in rows:
        keys += [k for k in r if k not in keys]
    buf = io.StringIO()
    buf.write(f"# foilmap export summary. {CAUTION}\n")
    w = csv.DictWriter(buf, fieldnames=keys, lineterminator="\n")
    w.writeheader()
    for r in rows:
        w.writerow(r)
    write_text_atomic(out / "summary.csv", buf.getvalue())
    if progress is not None:
        progress.close()
    return rows
