"""The two-stage map: closure, derivatives, the offset-circle limit, the trailing-edge angle and
the exact validity checks."""

from __future__ import annotations

import numpy as np
import pytest
from conftest import joukowski

from foilmap import SectionSet, offset_circle_coefficients
from foilmap.section.conformal import (
    CircleGrid,
    critical_points_inside,
    map_at,
    map_on_grid,
)


def test_closure_maps_circle_point_one_to_trailing_edge(shaped):
    m = map_at(shaped, np.array([[1.0 + 0j]]))
    assert m.g[0, 0] == pytest.approx(1.0, abs=1e-14)  # A₀ = −Σ Aₙ closes g(1) = 1
    assert m.z[0, 0] == pytest.approx(shaped.k[0], abs=1e-12)  # TE at z = k


def test_offset_circle_series_reproduces_the_circle():
    # Aₙ = (−1)^{n+1} (μ/(1−μ))ⁿ / n gives z₁ = μ + (1 − μ) ζ (series of log(1 + c/ζ))
    mu = -0.1 + 0.05j
    sec = SectionSet(offset_circle_coefficients(mu, 30)[None, :], [0.0])
    zeta = np.exp(1j * np.linspace(0.1, 6.2, 50))[None, :]
    m = map_at(sec, zeta)
    np.testing.assert_allclose(m.g, mu + (1 - mu) * zeta, atol=1e-14)


def test_joukowski_stage_is_z1_plus_inverse_for_zero_te_angle():
    sec = joukowski(-0.1)
    zeta = np.exp(1j * np.linspace(0.1, 6.2, 50))[None, :]
    m = map_at(sec, zeta)
    np.testing.assert_allclose(m.z, m.g + 1.0 / m.g, atol=1e-12)  # k = 2: z = z₁ + 1/z₁


@pytest.mark.parametrize("r", [1.0, 1.3])
def test_analytic_derivatives_match_finite_differences(shaped, r):
    zeta = r * np.exp(1j * np.linspace(0.2, 6.0, 40))[None, :]
    eps = 1e-6
    m = map_at(shaped, zeta)
    mp = map_at(shaped, zeta + eps)
    mm = map_at(shaped, zeta - eps)
    np.testing.assert_allclose(m.dz, (mp.z - mm.z) / (2 * eps), rtol=1e-7)
    d2 = (mp.dz - mm.dz) / (2 * eps)
    np.testing.assert_allclose(m.q2, zeta * d2 / m.dz, rtol=1e-6, atol=1e-7)


def test_grid_and_pointwise_evaluation_agree(shaped):
    grid = CircleGrid.get(64, 8)
    a = map_on_grid(shaped, grid)
    b = map_at(shaped, grid.zeta[None, :])
    np.testing.assert_allclose(a.z, b.z, atol=1e-13)
    np.testing.assert_allclose(a.q2, b.q2, atol=1e-11)


@pytest.mark.parametrize("tau_deg", [0.0, 6.0, 15.0, 30.0])
def test_trailing_edge_angle_equals_tau(tau_deg):
    # measured from the contour: the angle between the chords from the TE to the points at
    # φ = ±δ tends to the interior angle τ as δ → 0 (Kármán–Trefftz 1918; exact theory)
    sec = joukowski(-0.08 + 0.03j, tau_deg, 16)
    k = sec.k[0]
    angles = []
    for d in (1e-3, 1e-4, 1e-5):
        m = map_at(sec, np.exp(1j * np.array([[d, -d]])))
        u, lo = m.z[0, 0] - k, m.z[0, 1] - k
        angles.append(abs(np.angle(u / lo)))
    assert np.degrees(angles[-1]) == pytest.approx(tau_deg, abs=2e-3)
    # converging: each step closer
    errs = [abs(np.degrees(a) - tau_deg) for a in angles]
    assert errs[2] <= errs[0] + 1e-12


def test_schur_cohn_agrees_with_polynomial_roots():
    rng = np.random.default_rng(7)
    for n in (1, 2, 5, 8, 12):
        c = 0.3 * (rng.standard_normal((200, n)) + 1j * rng.standard_normal((200, n)))
        c /= np.arange(1, n + 1)
        for radius in (0.95, 0.7):
            got = critical_points_inside(c, radius)
            want = []
            for row in c:
                poly = np.concatenate([[1.0], -np.arange(1, n + 1) * row])  # ζᴺ − Σ n Aₙ ζ^{N−n}
                want.append(np.all(np.abs(np.roots(poly)) < radius))
            np.testing.assert_array_equal(got, want)


def test_validity_does_not_depend_on_sampling():
    # near-circle passing 0.004 from z₁ = −1 (inside the 0.02 margin): caught at any resolution
    from foilmap.section.evaluation import evaluate
    from foilmap.section.status import Status

    eps = 0.002  # circle centre −ε passes at −1 − 2ε
    sec = joukowski(-eps + 0.0j, 0.0)
    for points in (64, 256, 2048):
        ev = evaluate(sec, alpha=0.0, points=points)
        assert ev.status[0] == Status.SINGULAR_POINT


def test_crossing_the_branch_cut_is_detected():
    # the circle through ζ = 1 with centre μ = +0.1 meets the real axis again at −0.8, inside
    # the Kármán–Trefftz cut [−1, 1]: z₁ = −1 lies outside it (test data, invented)
    from foilmap.section.evaluation import evaluate
    from foilmap.section.status import Status

    for points in (64, 256, 1024):
        assert evaluate(joukowski(0.1 + 0.0j, 8.0), alpha=0.0, points=points).status[0] == \
            Status.BRANCH_CUT
    # and the usual offset circle (centre −0.08) passes
    assert evaluate(joukowski(-0.08 + 0.0j, 8.0), alpha=0.0).status[0] == Status.OK


def test_garbage_coefficients_give_status_codes_not_exceptions():
    from foilmap.section.evaluation import evaluate

    rng = np.random.default_rng(3)
    c = 2.0 * (rng.standard_normal((300, 6)) + 1j * rng.standard_normal((300, 6)))
    c[:5] = np.nan
    c[5:10] = 1e6
    sec = SectionSet(c, rng.uniform(0, 1.0, 300))
    ev = evaluate(sec, cl=0.5, proxies=("severity", "thwaites", "stratford"), reynolds=1e6)
    assert ev.status.shape == (300,)
    bad = ev.status != 0
    assert bad.sum() > 250
    assert np.all(np.isnan(ev.cl[bad]))
    assert np.all(np.isfinite(ev.cl[~bad]))
