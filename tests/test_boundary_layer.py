"""Recovery proxies: Thwaites' method on the textbook cases, Stratford's criterion and the
inviscid severity on simple distributions, and the proxies on sections."""

from __future__ import annotations

import math

import numpy as np
import pytest

from foilmap.section.evaluation import evaluate
from foilmap.section.proxies import recovery_severity, stratford, thwaites


def test_thwaites_flat_plate():
    # u = 1: θ² Re/L = 0.45 x, so θ √Re_x / x = √0.45 = 0.671 (Thwaites 1949; White, Viscous
    # Fluid Flow, §4-6: Blasius' exact value is 0.664)
    s = np.linspace(0.0, 1.0, 2001)[None, :]
    u = np.ones_like(s)
    res = thwaites(s, u, np.zeros_like(s))
    ratio = np.sqrt(res.theta2_re[0, 1:] / s[0, 1:])
    np.testing.assert_allclose(ratio, 0.671, atol=5e-4)
    assert abs(ratio[-1] - 0.664) / 0.664 < 0.011  # within 1 % of Blasius
    assert np.isnan(res.separation_s[0])


def test_thwaites_stagnation_point():
    # u = a s (Hiemenz flow): λ = 0.45/6 = 0.075 everywhere (Thwaites 1949; White, Viscous Fluid
    # Flow, §4-6)
    s = np.linspace(1e-3, 0.2, 400)[None, :]
    a = 3.0
    u = a * s
    res = thwaites(s, u, np.full_like(s, a), integral0=a**5 * s[:, 0] ** 6 / 6.0)
    np.testing.assert_allclose(res.lam, 0.075, rtol=2e-4)


def test_thwaites_howarth_linearly_retarded_flow():
    # u = 1 − x/L: Thwaites' method separates at x/L = 1 − 2.2^(−1/6) = 0.1231 (worked from the
    # method in closed form); Howarth's exact solution separates at 0.120 (Howarth 1938; White,
    # Viscous Fluid Flow, §4-6, Table 4-7)
    s = np.linspace(0.0, 0.2, 4001)[None, :]
    u = 1.0 - s
    res = thwaites(s, u, -np.ones_like(s))
    assert res.separation_s[0] == pytest.approx(1 - 2.2 ** (-1 / 6), abs=2e-5)
    assert res.separation_s[0] == pytest.approx(0.123, abs=5e-4)
    assert abs(res.separation_s[0] - 0.120) < 0.004
    assert res.min_lambda[0] == pytest.approx(-0.09, abs=2e-3)


def test_stratford_margin_grows_with_recovery_and_falls_with_reynolds():
    # a peak at s = 0.1 followed by a linear fall of the speed (synthetic test distributions)
    s = np.linspace(0.0, 1.0, 2001)[None, :].repeat(3, axis=0)
    slope = np.array([0.2, 0.4, 0.6])[:, None]
    u = np.where(s < 0.1, 1.0 + s, 1.1 - slope * (s - 0.1))
    du = np.where(s < 0.1, 1.0, -slope)
    mask = np.ones_like(s, dtype=bool)
    lo = stratford(s, u, du, mask, 1e6)
    hi = stratford(s, u, du, mask, 1e7)
    assert np.all(np.diff(lo.margin) > 0)  # steeper recovery → nearer separation
    assert np.all(hi.margin < lo.margin)  # (10⁻⁶ Re')^(−0.1): higher Re tolerates more
    # no recovery, no margin
    flat = stratford(s[:1], np.ones_like(s[:1]), np.zeros_like(s[:1]), mask[:1], 1e6)
    assert flat.margin[0] == 0.0


def test_severity_is_the_falkner_skan_exponent():
    # u ∝ sᵐ after the peak gives −(s/u) du/ds = −m exactly (Falkner–Skan similarity)
    s = np.linspace(0.5, 1.0, 501)[None, :]
    for m in (-0.05, -0.09, -0.2):
        u = s**m
        sev = recovery_severity(s, u, m * s ** (m - 1), np.ones_like(s, dtype=bool))
        assert sev[0] == pytest.approx(-m, rel=1e-12)


def test_proxies_on_a_section_are_finite_and_ordered(cambered):
    ev = evaluate(cambered, cl=0.5, proxies=("severity", "thwaites", "stratford"), reynolds=3e6)
    assert ev.status[0] == 0
    assert 0 < ev.severity[0] < 5
    # laminar separation after the suction peak on the upper surface, before the proxy end
    assert ev.cp_min_x[0] < ev.thwaites_sep_x_upper[0] < 0.9
    assert ev.thwaites_min_lambda[0] == pytest.approx(-0.09, abs=0.01)
    assert ev.stratford_margin[0] > 0
    # a higher lift gives a harsher recovery
    ev2 = evaluate(cambered, cl=1.0, proxies=("severity",))
    assert ev2.severity[0] > ev.severity[0]


def test_thwaites_at_the_stagnation_point_of_a_section(cambered):
    # the first points past the stagnation point follow u ∝ s: λ → 0.075 (Hiemenz)
    from foilmap.section.conformal import CircleGrid, map_on_grid
    from foilmap.section.evaluation import analyse
    from foilmap.section.flow import surface_speed
    from foilmap.section.surfaces import surfaces_from_stagnation

    an = analyse(cambered, cl=0.4, proxies=())
    grid = CircleGrid.get(4096, cambered.n_coefficients)
    mv = map_on_grid(cambered, grid)
    q = surface_speed(an.flow, mv, grid)
    for sf in surfaces_from_stagnation(an.flow, mv, grid, an.frame, q):
        res = thwaites(sf.s, sf.u, sf.du_ds, sf.mask, sf.integral0)
        first = np.argmax(sf.mask[0])
        lam = res.lam[0, first : first + 3]
        np.testing.assert_allclose(lam, 0.075, atol=2e-3)
        assert math.isfinite(res.separation_s[0])
