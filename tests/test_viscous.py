"""Integral boundary-layer screening: the textbook cases and drag of ordinary sections."""

from __future__ import annotations

import json
import math
import subprocess
import sys

import numpy as np
import pytest
from test_fit import fitted

from foilmap import analyse, load_section
from foilmap.section.screening import screen_analysis, screen_surface


def plate(n=3000):
    s = np.concatenate([[0.0], np.geomspace(1e-6, 1.0, n)])[None, :]
    return s, np.ones_like(s), np.zeros_like(s), np.ones_like(s, dtype=bool)


def test_laminar_flat_plate_momentum_thickness():
    # θ √Re_x / x = √0.45 = 0.671 by Thwaites' method; Blasius' exact value 0.664 (Thwaites
    # 1949; White, Viscous Fluid Flow, §4-6): at Re = 1e5 the plate stays laminar (Michel)
    s, u, d, m = plate()
    lay = screen_surface(s, u, d, m, 1e5)
    assert np.isnan(lay.s_transition[0])
    x = s[0, 1:]
    ratio = lay.theta[0, 1:] * np.sqrt(1e5 * x) / x
    np.testing.assert_allclose(ratio[x > 1e-3], 0.671, atol=1e-3)
    assert abs(ratio[-1] - 0.664) / 0.664 < 0.011


@pytest.mark.parametrize("re_x", [1e6, 1e7, 1e8])
def test_turbulent_flat_plate_skin_friction(re_x):
    # Head's method with Ludwieg–Tillmann, tripped at the leading edge, against the 1/7-power
    # law Cf = 0.0592 Re_x^(−0.2) (Schlichting, Boundary-Layer Theory, ch. 21): within 10 %
    s, u, d, m = plate()
    lay = screen_surface(s, u, d, m, re_x, s_force_transition=np.array([1e-5]))
    cf = lay.cf[0, -1]
    assert cf == pytest.approx(0.0592 * re_x**-0.2, rel=0.10)
    assert 1.25 < lay.shape[0, -1] < 1.5  # a flat-plate turbulent layer, H ≈ 1.3–1.4
    assert np.isnan(lay.s_turbulent_separation[0])


def test_howarth_retarded_flow_separates_laminar():
    # u = 1 − x: Thwaites' method separates at 0.123, Howarth's exact solution at 0.120
    # (Howarth 1938; White, Viscous Fluid Flow, §4-6)
    s = np.linspace(0.0, 0.2, 4001)[None, :]
    lay = screen_surface(s, 1 - s, -np.ones_like(s), np.ones_like(s, dtype=bool), 1e4)
    assert lay.s_laminar_separation[0] == pytest.approx(0.123, abs=2e-3)


def test_circular_cylinder_laminar_separation_angle():
    # u = 2 sin φ on a unit cylinder: Thwaites' method separates at about 103–104°, the exact
    # solution at 104.5° (White, Viscous Fluid Flow, §4-6; Schlichting, Boundary-Layer Theory)
    phi = np.linspace(0.0, 0.9 * np.pi, 20001)[None, :]
    lay = screen_surface(phi, 2 * np.sin(phi), 2 * np.cos(phi), np.ones_like(phi, dtype=bool),
                         1e5)
    angle = math.degrees(lay.s_laminar_separation[0])
    assert 103.0 <= angle <= 104.0


def test_drag_of_smooth_twelve_percent_sections():
    # smooth 12 % sections at Re 3e6 and low lift have profile drag of order 0.005–0.010
    # (common practice; the drag polars of Abbott & von Doenhoff show about 0.006 for the NACA
    # 0012, from memory); the screening must land in that range and fall as Re grows
    _, _, naca = fitted("0012", 48)
    ex = load_section(__import__("conftest").ROOT / "studies" / "example-section.toml").to_set()
    for sec, cl in ((naca, 0.0), (naca, 0.4), (ex, 0.5)):
        an = analyse(sec, cl=cl)
        cds = [screen_analysis(an, re).cd[0] for re in (1e6, 3e6, 9e6)]
        assert 0.005 <= cds[1] <= 0.010
        assert cds[0] > cds[1] > cds[2]


def test_screen_command_json(tmp_path):
    root = __import__("conftest").ROOT
    r = subprocess.run([sys.executable, "-m", "foilmap.cli", "screen",
                        str(root / "studies" / "example-section.toml"), "--cl", "0.5", "--re",
                        "3e6", "--json"], capture_output=True, text=True, timeout=120)
    assert r.returncode == 0, r.stderr
    rec = json.loads(r.stdout)
    assert 0.004 < rec["cd"] < 0.012
    assert 0 < rec["upper"]["x_transition"] < rec["lower"]["x_transition"] < 1
    assert "not a replacement for a viscous solver" in rec["note"]


def test_profile_drag_as_a_study_objective():
    from foilmap.design.problem import Problem
    from foilmap.store.studyfile import load_study_text

    text = """
[study]
name = "drag"
seeds = [1]
[shape]
coefficients = 4
[[point]]
name = "p"
cl = 0.4
reynolds = 3.0e6
[objectives]
profile_drag = 1.0
"""
    st = load_study_text(text)
    run = st.runs()[0]
    prob = Problem.from_run(st, run)
    x = prob.param.x0()[None, :].repeat(3, axis=0)
    x[1:, 0] += [0.3, -0.3]
    out = prob.evaluate(x)
    assert out.status.tolist() == [0, 0, 0]
    # the objective is the screening's Cd of the same sections at the design Cl
    an = analyse(prob.param.sections(x), cl=0.4)
    np.testing.assert_allclose(out.objectives[:, 0], screen_analysis(an, 3e6, samples=256).cd,
                               rtol=1e-12)
    # drag of order 0.005-0.010 for smooth sections at this Re (common practice), widened for
    # the perturbed shapes
    assert np.all((0.003 < out.objectives[:, 0]) & (out.objectives[:, 0] < 0.02))
    with pytest.raises(Exception, match="objective profile_drag needs 'reynolds'"):
        load_study_text(text.replace("reynolds = 3.0e6\n", ""))
