"""Section geometry: leading-edge radius, area, thickness stations and resampled coordinates,
each against an independent route on the finely sampled contour."""

from __future__ import annotations

import numpy as np
import pytest

from foilmap import analyse
from foilmap.section.conformal import map_at
from foilmap.section.geometry import coordinates, exact_points_at_x, thickness_at


def fine_contour(sec, an, n=400_000):
    phi = np.linspace(0.0, 2 * np.pi, n, endpoint=False)
    z = map_at(sec, np.exp(1j * phi)[None, :]).z
    return an.frame.to_chord(z)[0], phi


def test_leading_edge_radius_against_circle_fit(shaped):
    # independent route: the circle through three contour points closing on the LE
    an = analyse(shaped, alpha=0.0)
    phi_le = an.frame.phi_le[0]
    d = 1e-4
    z = an.frame.to_chord(map_at(shaped, np.exp(1j * (phi_le + np.array([[-d, 0.0, d]])))).z)[0]
    a, b, c = z
    r = abs(b - a) * abs(c - b) * abs(a - c) / (2 * abs(np.imag(np.conj(b - a) * (c - a))))
    assert an.evaluation.le_radius[0] == pytest.approx(r, rel=1e-6)


def test_leading_edge_is_the_farthest_point_from_the_trailing_edge(shaped):
    an = analyse(shaped, alpha=0.0)
    zc, _ = fine_contour(shaped, an)
    assert np.abs(zc - 1.0).max() == pytest.approx(1.0, abs=1e-12)
    assert zc.real.min() >= -1e-12  # every point within one chord of the TE has x ≥ 0


def test_area_against_polygon(cambered):
    an = analyse(cambered, alpha=0.0)
    zc, _ = fine_contour(cambered, an)
    x, y = zc.real, zc.imag
    poly = 0.5 * np.sum(x * np.roll(y, -1) - np.roll(x, -1) * y)
    assert an.evaluation.area[0] == pytest.approx(poly, rel=2e-5)


def test_thickness_and_camber_against_fine_contour(shaped):
    an = analyse(shaped, alpha=0.0)
    zc, phi = fine_contour(shaped, an)
    upper = phi < an.frame.phi_le[0]
    xu, yu = zc.real[upper][::-1], zc.imag[upper][::-1]
    xl, yl = zc.real[~upper], zc.imag[~upper]
    xs = np.linspace(0.001, 0.999, 20001)
    t = np.interp(xs, xu, yu) - np.interp(xs, xl, yl)
    cam = 0.5 * (np.interp(xs, xu, yu) + np.interp(xs, xl, yl))
    ev = an.evaluation
    assert ev.thickness[0] == pytest.approx(t.max(), abs=2e-7)
    assert ev.thickness_x[0] == pytest.approx(xs[np.argmax(t)], abs=2e-3)
    assert ev.camber[0] == pytest.approx(cam.max(), abs=2e-7)
    assert ev.camber_x[0] == pytest.approx(xs[np.argmax(cam)], abs=5e-3)
    # thickness at given stations from the sampled split, linear between samples
    tu, tl = thickness_at(an.split, np.array([0.1, 0.5, 0.9]))
    np.testing.assert_allclose(tu - tl, np.interp([0.1, 0.5, 0.9], xs, t)[None, :], atol=2e-4)


@pytest.mark.parametrize("points", [11, 160, 161])
def test_cosine_coordinates_lie_on_the_contour_at_cosine_stations(shaped, points):
    an = analyse(shaped, alpha=0.0)
    zc = coordinates(shaped, an.frame, an.split, points, "cosine")[0]
    assert zc.shape == (points,)
    assert zc[0] == 1.0 and zc[-1] == 1.0
    le = np.argmin(np.abs(zc))
    assert zc[le] == 0.0
    assert np.all(zc.imag[1:le] > 0) and np.all(zc.imag[le + 1 : -1] < 0)  # TE → upper → LE
    m_up = le + 1
    want_up = 0.5 * (1 - np.cos(np.linspace(0, np.pi, m_up)))[::-1]
    np.testing.assert_allclose(zc.real[: le + 1], want_up, atol=1e-12)
    # each point is on the contour: compare with the fine contour's y at that x
    fine, phi = fine_contour(shaped, an)
    upper = phi < an.frame.phi_le[0]
    yu = np.interp(zc.real[1:le], fine.real[upper][::-1], fine.imag[upper][::-1])
    np.testing.assert_allclose(zc.imag[1:le], yu, atol=1e-9)


def test_map_spacing_coordinates(shaped):
    an = analyse(shaped, alpha=0.0)
    zc = coordinates(shaped, an.frame, an.split, 65, "map")[0]
    phi = np.linspace(0, 2 * np.pi, 65)[1:-1]
    want = an.frame.to_chord(map_at(shaped, np.exp(1j * phi)[None, :]).z)[0]
    np.testing.assert_allclose(zc[1:-1], want, atol=1e-14)
    assert zc[0] == zc[-1] == 1.0


def test_the_surface_split_holds_the_exact_edge_points(shaped):
    # the interpolation key runs −1 (TE, upper) → 0 (LE) → +1 (TE, lower) through the exact
    # edge points: y = 0 at both ends and at the leading edge, φ = 0, φ_LE and 2π there
    an = analyse(shaped, alpha=0.0)
    sp = an.split
    key, y, phi = sp.key[0], sp.y[0], sp.phi[0]
    assert sp.monotone[0] and np.all(np.diff(key) > 0)
    assert (key[0], y[0], phi[0]) == (-1.0, 0.0, 0.0)
    assert (key[-1], y[-1], phi[-1]) == (1.0, 0.0, 2 * np.pi)
    le = int(np.flatnonzero(key == 0.0)[0])
    assert y[le] == 0.0 and phi[le] == an.frame.phi_le[0]
    # near the leading edge the interpolated ordinates close on the exact ones
    x = np.array([2e-4, 1e-3])
    yu, yl = thickness_at(sp, x)
    zu = exact_points_at_x(shaped, an.frame, sp, -x)
    zl = exact_points_at_x(shaped, an.frame, sp, x)
    np.testing.assert_allclose(yu[0], zu[0].imag, atol=2e-3)
    np.testing.assert_allclose(yl[0], zl[0].imag, atol=2e-3)
