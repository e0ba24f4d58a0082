"""The panel method (an independent discretisation in benchmarks/) converges to the exact
conformal Cl and Cp as panels are added."""

from __future__ import annotations

import math

import numpy as np
import pytest
from panel import panel_solve

from foilmap import analyse
from foilmap.section.conformal import map_at
from foilmap.section.geometry import coordinates


@pytest.mark.parametrize("alpha_deg", [0.0, 4.0])
def test_panel_cl_converges_to_conformal(cambered, alpha_deg):
    a = math.radians(alpha_deg)
    an = analyse(cambered, alpha=a)
    exact = an.evaluation.cl[0]
    errs = []
    for n in (50, 100, 200, 400):
        zc = coordinates(cambered, an.frame, an.split, n + 1, "cosine")
        errs.append(abs(panel_solve(zc.real, zc.imag, a)["cl"][0] - exact))
    assert errs[-1] < 5e-4
    assert all(e2 < e1 for e1, e2 in zip(errs, errs[1:]))  # monotone convergence
    assert errs[0] / errs[-1] > 10  # about second order: 8× panels, > 10× smaller error


def test_panel_cp_converges_to_conformal(cambered):
    a = math.radians(3.0)
    an = analyse(cambered, alpha=a)
    fl, fr = an.flow, an.frame
    errs = []
    for n in (100, 400):
        zc = coordinates(cambered, fr, an.split, n + 1, "cosine")
        res = panel_solve(zc.real, zc.imag, a)
        # exact Cp at the panel midpoints' x on the same surface: locate them on a fine contour
        phi = np.linspace(0, 2 * np.pi, 200_001)[1:-1]
        m = map_at(cambered, np.exp(1j * phi)[None, :])
        zf = fr.to_chord(m.z)[0]
        ap = fl.alpha_circle[0]
        q = 2 * fl.speed[0] * np.abs(np.sin(phi - ap) + np.sin(ap)) / np.abs(m.dz[0])
        upper = phi < fr.phi_le[0]
        xc, yc, cp = res["xc"][0], res["yc"][0], res["cp"][0]
        mid = (xc > 0.05) & (xc < 0.9)
        up = mid & (yc > 0)
        cp_exact = np.interp(xc[up], zf.real[upper][::-1], (1 - q**2)[upper][::-1])
        errs.append(np.max(np.abs(cp[up] - cp_exact)))
    assert errs[1] < 0.01
    assert errs[1] < errs[0] / 3
