"""A run's problem (design/problem.py): objectives and constraints of a batch, checked against the
numpy reference figures of the same sections; the penalty of invalid candidates, ε-constraint
runs, the front vectors of a multi-objective search, and the operating point's Mach number and
cavitation number."""

from __future__ import annotations

import numpy as np
import pytest
from conftest import small_study

from foilmap.design.problem import INVALID_CONSTRAINT, Outcome, Problem, front_vectors
from foilmap.section.evaluation import analyse
from foilmap.section.geometry import exact_points_at_x
from foilmap.section.operating import compressible_cp, critical_mach
from foilmap.section.status import Status
from foilmap.store.studyfile import load_study_text

CONSTRAINTS = """thickness = [0.10, 0.16]
min_le_radius = 0.006
cm = [-0.12, 0.0]
station_thickness = [[0.3, 0.09], [0.9, 0.015]]"""


def problem(objectives="peak_suction = 1.0\nseverity = 0.1", constraints=CONSTRAINTS,
            point="cl = 0.5\ncl_range = [0.4, 0.6]", extra=""):
    text = small_study("prob", [1], 200, objectives=objectives, constraints=constraints,
                       extra=extra).replace("cl = 0.5", point, 1)
    st = load_study_text(text)
    return Problem.from_run(st, st.runs()[0])


def batch(prob, nb=24, seed=0):
    """Search vectors around the start, the last two far out (invalid shapes; test data)."""
    y = 0.6 * np.random.default_rng(seed).standard_normal((nb, prob.param.dimension))
    y[-2:] = 40.0
    return y


def test_constraints_and_objectives_are_the_reference_figures():
    prob = problem()
    assert prob.constraint_names == ["thickness_low", "thickness_high", "min_le_radius",
                                     "cm_low", "cm_high", "thickness_at_0.3", "thickness_at_0.9"]
    y = batch(prob)
    out = prob.evaluate(y)
    sec = prob.param.sections(y)
    an = analyse(sec, cl=0.5, proxies=("severity",))
    ev = an.evaluation
    ok = out.status == Status.OK
    assert ok.sum() >= 15 and not ok[-2:].any()
    np.testing.assert_array_equal(out.status[ok], ev.status[ok])
    xs = np.array([0.3, 0.9])
    st = (exact_points_at_x(sec, an.frame, an.split, -xs).imag
          - exact_points_at_x(sec, an.frame, an.split, xs).imag)
    g = out.constraints[ok]
    expect = np.column_stack([0.10 - ev.thickness, ev.thickness - 0.16, 0.006 - ev.le_radius,
                              -0.12 - ev.cm_quarter_chord, ev.cm_quarter_chord - 0.0,
                              0.09 - st[:, 0], 0.015 - st[:, 1]])[ok]
    np.testing.assert_allclose(g, expect, rtol=0, atol=1e-9)
    # the peak suction objective is the largest over the point's Cls (to the certificate)
    peak = np.fmax(-ev.cp_min, np.fmax(an.peak_suction_at(0.4)[0], an.peak_suction_at(0.6)[0]))
    np.testing.assert_allclose(out.objectives[ok, 0], peak[ok], rtol=2.1e-7)
    np.testing.assert_allclose(out.objectives[ok, 1], ev.severity[ok], rtol=0, atol=1e-9)
    np.testing.assert_allclose(out.f[ok], out.objectives[ok] @ [1.0, 0.1], rtol=1e-15)
    assert np.array_equal(out.feasible, ok & np.all(out.constraints <= 0, axis=1))


def test_invalid_candidates_rank_behind_every_valid_one():
    prob = problem()
    out = prob.evaluate(batch(prob))
    ok = out.status == Status.OK
    worst = out.f[ok].max()
    assert np.all(out.f[~ok] == worst + 1 + abs(worst))
    assert np.all(out.constraints[~ok] == INVALID_CONSTRAINT) and INVALID_CONSTRAINT > 0
    assert np.isnan(out.objectives[~ok]).all() and not out.feasible[~ok].any()
    f, g = Problem.penalise(np.array([0.5, 2.0]), np.zeros((2, 1)), np.array([False, False]))
    assert list(f) == [1000.0, 1000.0] and list(g[:, 0]) == [1.0, 1.0]


def test_an_epsilon_run_bounds_its_second_objective():
    prob = problem(extra="[fronts]\nreference_point = [3.0, 3.0]\n")
    prob = Problem(prob.param, prob.point, prob.objectives, prob.constraints, prob.samples,
                   prob.proxy_end, epsilon=0.4, reference_point=prob.reference_point)
    assert prob.constraint_names[-1] == "epsilon_severity"
    assert prob.constraint_scales[-1] == pytest.approx(max(0.05 * 0.4, 1e-3))
    out = prob.evaluate(batch(prob))
    ok = out.status == Status.OK
    np.testing.assert_array_equal(out.f[ok], out.objectives[ok, 0])
    np.testing.assert_allclose(out.constraints[ok, -1], out.objectives[ok, 1] - 0.4, atol=0)


def test_front_vectors_penalise_by_scaled_violation():
    prob = problem(extra="[fronts]\nreference_point = [3.0, 2.0]\n")
    obj = np.array([[1.0, 0.5], [1.2, 0.4], [np.nan, np.nan]])
    g = np.array([[-0.01] * 7, [0.02, -1, -1, -1, -1, -1, 0.005], [1.0] * 7])
    out = Outcome(np.zeros(3), obj, g, np.array([0, 0, Status.FOLDED], dtype=np.int8),
                  np.array([True, False, False]))
    vec = front_vectors(prob, out)
    np.testing.assert_array_equal(vec[0], [1.0, 0.5])  # feasible: the objectives themselves
    # valid but infeasible: + 10 × Σ max(g / typical size, 0) = 10 × (0.02/0.01 + 0.005/0.005)
    np.testing.assert_allclose(vec[1], [1.2 + 30.0, 0.4 + 30.0], rtol=1e-12)
    np.testing.assert_array_equal(vec[2], [3.0 + 4.0, 2.0 + 3.0])  # ref + 1 + |ref|


def test_problem_with_mach_and_cavitation():
    text = small_study("c", [1], 200, constraints="cavitation_margin = 0.1\n"
                       "min_critical_mach = 0.5").replace(
        "cl = 0.5", "cl = 0.5\nmach = 0.4\nsigma = 1.5", 1)
    text = text.replace("peak_suction = 1.0", "peak_suction = 1.0\ncritical_mach_deficit = 1.0")
    st = load_study_text(text)
    run = st.runs()[0]
    prob = Problem.from_run(st, run)
    y = np.zeros((1, prob.param.dimension))
    out = prob.evaluate(y)
    sec = prob.param.sections(y)
    pk = -analyse(sec, cl=0.5, proxies=()).evaluation.cp_min[0]
    names = prob.objective_names
    assert out.objectives[0, names.index("peak_suction")] == pytest.approx(
        -float(compressible_cp(-pk, 0.4)), rel=1e-9)
    assert out.objectives[0, names.index("critical_mach_deficit")] == pytest.approx(
        1 - float(critical_mach(-pk)), rel=1e-9)
    g = dict(zip(prob.constraint_names, out.constraints[0]))
    assert g["cavitation_margin"] == pytest.approx(0.1 - (1.5 - pk), rel=1e-9)
    assert g["min_critical_mach"] == pytest.approx(0.5 - float(critical_mach(-pk)), rel=1e-9)
