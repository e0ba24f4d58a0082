"""Starting from an existing section: NACA four-digit coordinates, the conformal fit, the
handbook checks and the round trip (coordinate files themselves: test_coordfile.py)."""

from __future__ import annotations

import math
import subprocess
import sys

import numpy as np
import pytest
from panel import panel_solve

from foilmap import SectionSet, load_section
from foilmap.section.evaluation import analyse, evaluate
from foilmap.section.evaluation import speed_at_stations
from foilmap.section.fitting import (
    contour_deviation,
    dense_reference,
    fit_coordinates,
    fit_section,
)
from foilmap.section.geometry import coordinates
from foilmap.section.naca import naca4_coordinates, naca4_surfaces
from foilmap.store.coordfile import normalise_loop


def fitted(code: str, n: int = 48, points: int = 401):
    c = normalise_loop(naca4_coordinates(code, points, closed_te=True), code)
    fit = fit_section(c.xy, c.le_index, n)
    return c, fit, SectionSet(fit.coefficients[None, :], [fit.te_angle])


def test_naca_formula_reference_points():
    # NACA 0012 half-thickness at x = 0.3 from the closed-edge formula: 5·0.12·(0.162619 −
    # 0.037800 − 0.031644 + 0.007676 − 0.000839) = 0.6 · 0.100012 = 0.060007 (worked by hand);
    # the open edge has 0.00126 thickness at x = 1 (Abbott & von Doenhoff, §6.4)
    _, yu, _, yl = naca4_surfaces(0.0, 0.0, 0.12, np.array([0.3, 1.0]), closed_te=True)
    assert yu[0] == pytest.approx(0.060007, abs=2e-6) and yu[1] == pytest.approx(0.0, abs=1e-12)
    _, yu, _, yl = naca4_surfaces(0.0, 0.0, 0.12, np.array([1.0]), closed_te=False)
    assert yu[0] - yl[0] == pytest.approx(0.00252, abs=1e-5)
    # 2412 mean line at its maximum: y_c(0.4) = 0.02 (the code's first digit)
    xu, yu, xl, yl = naca4_surfaces(0.02, 0.4, 0.12, np.array([0.4]))
    assert 0.5 * (yu[0] + yl[0]) == pytest.approx(0.02, abs=1e-12)


@pytest.mark.parametrize("code", ["0012", "2412", "4412"])
def test_fit_deviation_under_1e4_chord(code):
    c, fit, _ = fitted(code, 48)
    assert fit.converged
    assert fit.max_deviation < 1e-4
    assert fit.full_max_deviation < 1e-4


def test_naca0012_speed_table():
    # NACA 0012 at zero lift, v/V at x/c = 1.25 … 90 % (Abbott & von Doenhoff, Theory of Wing
    # Sections, Appendix I; values quoted from memory of that table).  The closed-edge section's
    # converged ideal flow differs from the table by up to about 0.007 near 5 % chord, so the
    # check is ±0.010 and needs a fit and evaluation good to about 0.002.
    xs = np.array([1.25, 2.5, 5, 7.5, 10, 15, 20, 25, 30, 40, 50, 60, 70, 80, 90]) / 100
    table = np.array([1.005, 1.114, 1.174, 1.184, 1.188, 1.188, 1.183, 1.174, 1.162, 1.135,
                      1.108, 1.080, 1.053, 1.022, 0.978])
    _, fit, sec = fitted("0012", 48)
    an = analyse(sec, alpha=0.0)
    q = speed_at_stations(an, xs)[0]
    np.testing.assert_allclose(q, table, atol=0.010)
    # the same coordinates by the independent panel method (1600 panels) agree far better
    xy = naca4_coordinates("0012", 1601, closed_te=True)
    res = panel_solve(xy[:, 0][None], xy[:, 1][None], 0.0)
    upper = res["yc"][0] > 0
    q_panel = np.interp(xs, res["xc"][0][upper][::-1], np.abs(res["vt"][0][upper][::-1]))
    np.testing.assert_allclose(q, q_panel, atol=0.002)


def test_naca0012_lift_slope():
    # common practice: dCl/dα ≈ 2π(1 + 0.77 t/c) for thick sections (the Joukowski thickness
    # correction, 0.77 = 4/(3√3)); the NACA 0012's 16.5° trailing-edge angle raises it a little
    # further: both the exact map and the independent panel method give 6.92/rad
    # = 2π(1 + 0.84 t/c), so the check is 2π < slope < 1.01 · 2π(1 + 0.77 t/c) and agreement
    # with the panel solution to 0.1 %
    _, fit, sec = fitted("0012", 48)
    ev = evaluate(sec, alpha=0.0)
    slope = ev.lift_slope[0]
    assert 2 * math.pi < slope < 1.01 * 2 * math.pi * (1 + 0.77 * 0.12)
    xy = naca4_coordinates("0012", 801, closed_te=True)
    a = math.radians(2.0)
    panel = panel_solve(xy[:, 0][None], xy[:, 1][None], a)["cl"][0] / a
    assert slope == pytest.approx(panel, rel=1e-3)


@pytest.mark.parametrize("code,alpha0,cm", [("2412", -2.077, -0.0531), ("4412", -4.154, -0.1062)])
def test_cambered_naca_against_thin_aerofoil_theory(code, alpha0, cm):
    # thin-aerofoil theory for the two-parabola mean line (Glauert's integrals of the published
    # mean line, Abbott & von Doenhoff §4.3; worked numerically in
    # test_thin_theory_values_of_the_mean_line below).  Thickness (12 %) shifts them slightly:
    # α_L0 by under 0.1° and Cm by under 6 % (it makes Cm more negative).
    _, fit, sec = fitted(code, 48)
    ev = evaluate(sec, alpha=0.0)
    assert math.degrees(ev.alpha_zero_lift[0]) == pytest.approx(alpha0, abs=0.1)
    assert ev.cm_quarter_chord[0] == pytest.approx(cm, rel=0.06)
    assert ev.cm_quarter_chord[0] < cm  # the thickness effect has the expected sign


@pytest.mark.parametrize("m,p,alpha0,cm", [(0.02, 0.4, -2.077, -0.0531), (0.04, 0.4, -4.154, -0.1062)])
def test_thin_theory_values_of_the_mean_line(m, p, alpha0, cm):
    # α_L0 = −(1/π)∫₀^π (dy_c/dx)(cos θ − 1) dθ, Cm_c/4 = (π/4)(A₂ − A₁),
    # Aₙ = (2/π)∫₀^π (dy_c/dx) cos nθ dθ, x = (1 − cos θ)/2 (Anderson, Fundamentals of
    # Aerodynamics, §4.8)
    th = np.linspace(0, np.pi, 200001)
    x = 0.5 * (1 - np.cos(th))
    dyc = np.where(x < p, 2 * m / p**2 * (p - x), 2 * m / (1 - p) ** 2 * (p - x))
    a0l = -np.trapezoid(dyc * (np.cos(th) - 1), th) / np.pi
    a1 = 2 / np.pi * np.trapezoid(dyc * np.cos(th), th)
    a2 = 2 / np.pi * np.trapezoid(dyc * np.cos(2 * th), th)
    assert math.degrees(a0l) == pytest.approx(alpha0, abs=2e-3)
    assert math.pi / 4 * (a2 - a1) == pytest.approx(cm, abs=2e-4)


def test_round_trip_recovers_coefficients_cl_and_cp(shaped):
    # a section made by the map, written as 401 cosine-spaced coordinates and fitted back
    an = analyse(shaped, alpha=math.radians(3.0))
    zc = coordinates(shaped, an.frame, an.split, 401, "cosine")[0]
    c = normalise_loop(np.column_stack([zc.real, zc.imag]), "round trip")
    # with the second singular point where the map had it, the map is unique: coefficients back
    ps = an.frame.to_chord(np.array([[-shaped.k[0] + 0j]]))[0, 0]
    fit = fit_coordinates(c.xy, c.le_index, singular_point=ps)
    np.testing.assert_allclose(fit.te_angle, shaped.te_angle[0], atol=2e-3)
    np.testing.assert_allclose(fit.coefficients[:8], shaped.coefficients[0], atol=2e-4)
    assert np.abs(fit.coefficients[8:]).max() < 2e-4
    # blind (Theodorsen–Garrick's own placement): the same section, so the same flow
    blind = fit_section(c.xy, c.le_index, 24)
    assert blind.max_deviation < 1e-4
    back = SectionSet(blind.coefficients[None, :], [blind.te_angle])
    ev0 = an.evaluation
    ev1 = evaluate(back, alpha=math.radians(3.0))
    assert ev1.cl[0] == pytest.approx(ev0.cl[0], abs=2e-3)
    assert ev1.cp_min[0] == pytest.approx(ev0.cp_min[0], abs=5e-3)
    xs = np.linspace(0.05, 0.9, 12)
    q0 = speed_at_stations(an, xs)[0]
    q1 = speed_at_stations(analyse(back, alpha=math.radians(3.0)), xs)[0]
    np.testing.assert_allclose(1 - q1**2, 1 - q0**2, atol=5e-3)


@pytest.mark.slow
def test_fit_command_and_a_study_started_from_it(tmp_path):
    coords = tmp_path / "n2412.dat"
    r = subprocess.run([sys.executable, "-m", "foilmap.cli", "naca", "2412", "-n", "201", "-o",
                        str(coords)], capture_output=True, text=True, timeout=60)
    assert r.returncode == 0, r.stderr
    sec = tmp_path / "n2412.toml"
    png = tmp_path / "fit.png"
    r = subprocess.run([sys.executable, "-m", "foilmap.cli", "fit", str(coords), "-n", "32", "-o",
                        str(sec), "--report", str(png)], capture_output=True, text=True,
                       timeout=120)
    assert r.returncode == 0, r.stderr
    assert "deviation with 32 coefficients" in r.stdout
    rec = load_section(sec)
    assert len(rec.coefficients) == 32 and rec.te_angle_deg == pytest.approx(16.5, abs=0.1)
    assert rec.provenance["max_deviation_chords"] < 3e-4
    assert png.read_bytes()[:4] == b"\x89PNG"
    # a study may start from the section file or from the coordinates themselves
    from foilmap.design.problem import Problem
    from foilmap.store.studyfile import load_study_text

    for start in ("n2412.toml", "n2412.dat"):
        text = f"""
[study]
name = "s"
seeds = [1]
[shape]
coefficients = 8
start = "{start}"
te_angle_deg = [10.0, 20.0]
[[point]]
name = "p"
cl = 0.5
[objectives]
peak_suction = 1.0
"""
        study = load_study_text(text, "study.toml", base_dir=str(tmp_path))
        run = study.runs()[0]
        problem = Problem.from_run(study, run)
        x0 = problem.param.x0()[None, :]
        start_sec = problem.param.sections(x0)
        np.testing.assert_allclose(start_sec.coefficients[0], rec.coefficients[:8], atol=2e-3)
        assert math.degrees(start_sec.te_angle[0]) == pytest.approx(16.5, abs=0.1)
        out = problem.evaluate(x0)
        assert out.status[0] == 0
        # the truncated start is the NACA 2412 to within the truncation's deviation
        ref = dense_reference(*(lambda c: (c.xy, c.le_index))(normalise_loop(
            naca4_coordinates("2412", 401), "n")))
        an = analyse(start_sec, alpha=0.0)
        zc = coordinates(start_sec, an.frame, an.split, 801, "map")[0]
        mx, _ = contour_deviation(np.column_stack([zc.real, zc.imag]), ref)
        assert mx < 2e-3
