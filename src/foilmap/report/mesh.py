"""An optional 2-D mesh seed around a section, in gmsh's own format (the ``mesh`` extra).

The domain is the region between the section and a circular far field of ``farfield`` chords
radius centred at mid-chord; the section wall gets a boundary-layer field whose first cell
height is ``first_cell`` chords.  Physical groups: ``wall``, ``farfield``, ``fluid``.  This is a
seed for a viscous solver's own meshing, not a validated CFD mesh.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from foilmap.errors import InputError

__all__ = ["check_gmsh", "write_mesh"]


def check_gmsh() -> None:
    """Fail with one clear line when the optional gmsh package is missing."""
    try:
        import gmsh  # noqa: F401
    except ImportError:
        raise InputError("meshing needs the gmsh package: install the mesh extra with "
                         "python -m pip install -e \".[mesh]\"") from None


def write_mesh(xy: np.ndarray, path: Path, farfield: float = 20.0, first_cell: float = 1e-5,
               growth: float = 1.15, wall_size: float = 0.004) -> dict:
    """Mesh the domain around the closed or open contour ``xy`` (coordinates layout) and write
    ``path`` (.msh); returns the node and element counts."""
    check_gmsh()
    import gmsh

    gmsh.initialize(interruptible=False)
    try:
        gmsh.option.setNumber("General.Terminal", 0)
        gmsh.model.add("foilmap-section")
        geo = gmsh.model.geo
        le = int(np.argmin(np.hypot(xy[:, 0], xy[:, 1])))
        closed = np.allclose(xy[0], xy[-1])
        pts_xy = xy[:-1] if closed else xy
        tags = [geo.addPoint(float(x), float(y), 0.0, wall_size) for x, y in pts_xy]
        upper = geo.addSpline(tags[: le + 1])
        lower = geo.addSpline(tags[le:] + ([tags[0]] if closed else []))
        wall = [upper, lower]
        if not closed:
            wall.append(geo.addLine(tags[-1], tags[0]))
        c = geo.addPoint(0.5, 0.0, 0.0)
        size_far = farfield / 8.0
        ring = [geo.addPoint(0.5 + farfield * np.cos(a), farfield * np.sin(a), 0.0, size_far)
                for a in (0.0, 0.5 * np.pi, np.pi, 1.5 * np.pi)]
        arcs = [geo.addCircleArc(ring[i], c, ring[(i + 1) % 4]) for i in range(4)]
        outer = geo.addCurveLoop(arcs)
        inner = geo.addCurveLoop(wall)
        fluid = geo.addPlaneSurface([outer, inner])
        geo.synchronize()
        gmsh.model.addPhysicalGroup(1, wall, name="wall")
        gmsh.model.addPhysicalGroup(1, arcs, name="farfield")
        gmsh.model.addPhysicalGroup(2, [fluid], name="fluid")
        f = gmsh.model.mesh.field.add("BoundaryLayer")
        gmsh.model.mesh.field.setNumbers(f, "CurvesList", wall)
        gmsh.model.mesh.field.setNumber(f, "Size", first_cell)
        gmsh.model.mesh.field.setNumber(f, "Ratio", growth)
        gmsh.model.mesh.field.setNumber(f, "Thickness", 0.02)
        gmsh.model.mesh.field.setNumber(f, "Quads", 1)
        gmsh.model.mesh.field.setAsBoundaryLayer(f)
        gmsh.model.mesh.generate(2)
        nodes = len(gmsh.model.mesh.getNodes()[0])
        types, elems, _ = gmsh.model.mesh.getElements(2)
        n_el = int(sum(len(e) for e in elems))
        gmsh.write(str(path))
        return {"nodes": nodes, "elements": n_el}
    finally:
        gmsh.finalize()
