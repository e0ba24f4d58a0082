"""The local-thickness floor, the crossing witness and the certificates that give up.

Test data: the coefficients below are sections met by foilmap's own searches of an invented
first study (five coefficients, Cl 0.6, peak suction only, no station thickness), and random
families around them; nothing here is a catalogue section.
"""

from __future__ import annotations

import numpy as np
import pytest

from foilmap.section import _compiled as C
from foilmap.section.conformal import SectionSet, map_at
from foilmap.section.evaluation import analyse
from foilmap.section.flow import certified_peak, flow_at_cl
from foilmap.section.geometry import floor_clearance, thickness_floor
from foilmap.section.status import Status

T0 = 0.005  # the default floor, chords (docs/study-file.md)

#: the best design of a search with the floor on: it sits on the floor near x/c 0.93 (found
#: with 41 floor stations; with the 25 of today it clears the one at 0.935 by 7e-5 c)
ON_FLOOR = SectionSet(np.array([[-0.04642932261734864 + 0.05362564388942115j,
                                 -0.009893183866954028 + 0.01617260370735679j,
                                 -0.011266603178053485 + 0.032568613345477664j,
                                 0.020273948038362334 + 0.013914222308468303j,
                                 0.0047078265973730235 - 0.005137666521612892j]]),
                      np.radians([6.297870083460637]))

#: the best design of the same search without the floor: a tail pinched to about 1e-5 c
PINCHED = SectionSet(np.array([[-0.06484759502198387 + 0.044348493308581635j,
                                -0.008922037063767244 + 0.04754185989169868j,
                                0.01653813890467487 + 0.02012035248294509j,
                                0.008612276282264488 - 0.0012908136388516665j,
                                0.0005539653016644956 - 0.0012325541307280261j]]),
                     np.radians([6.0015931753496385]))

#: a near-degenerate cusp (edge angle 0) whose two surfaces stay tangent to second order at the
#: edge: simple by dense sampling, but the one-to-one certificate runs out of arcs on it
TANGENT_CUSP = SectionSet(np.array([[
    -0.08089992971292727 + 0.030168809205726257j, 0.005825829830601177 - 0.003605546046471114j,
    -0.0020136856982466357 - 0.0014057458840289914j, -0.0008585162208104213 + 0.0024220683411914764j,
    4.4311822487029564e-05 - 8.27717463097123e-05j, 0.00048329098617197843 - 0.000854981529155936j,
    0.0008820342242648827 - 0.0004938170032914893j, 0.0002932331812858584 - 8.305920927303262e-05j,
]]), np.zeros(1))


def _validity(sec: SectionSet, floor: float):
    return C.validity_batch(np.ascontiguousarray(sec.coefficients),
                            np.ascontiguousarray(sec.te_angle), 256, 0.95, 0.02, floor)


def _around(base: SectionSet, size: float, nb: int, seed: int) -> SectionSet:
    rng = np.random.default_rng(seed)
    n = base.coefficients.shape[1]
    c = base.coefficients + size / np.arange(1, n + 1) * (
        rng.standard_normal((nb, n)) + 1j * rng.standard_normal((nb, n)))
    return SectionSet(c, np.repeat(base.te_angle, nb))


def _dense_thickness(sec: SectionSet, x: np.ndarray) -> np.ndarray:
    """Thickness at chord stations x by dense sampling of the contour (about 3·10⁴ points,
    geometric toward the trailing edge) and linear interpolation: an independent route."""
    phi = np.concatenate([np.geomspace(1e-9, 0.05, 4000), np.linspace(0.05, 2 * np.pi - 0.05,
                          24000), 2 * np.pi - np.geomspace(0.05, 1e-9, 4000)])
    an = analyse(sec, cl=0.0, proxies=())
    z = an.frame.to_chord(map_at(sec, np.broadcast_to(np.exp(1j * phi),
                                                      (len(sec), phi.size))).z)
    out = np.full((len(sec), x.size), np.nan)
    for i in range(len(sec)):
        up, lo = z[i, phi < an.frame.phi_le[i]], z[i, phi > an.frame.phi_le[i]]
        out[i] = (np.interp(x, up.real[::-1], up.imag[::-1]) - np.interp(x, lo.real, lo.imag))
    return out


def test_floor_rule_and_stations():
    # worked from the rule t0 min(1, x/0.05, ((1 - x)/0.2)^2)
    x = np.array([0.0, 0.025, 0.05, 0.5, 0.8, 0.9, 1.0])
    np.testing.assert_allclose(thickness_floor(x, T0),
                               [0.0, 0.5 * T0, T0, T0, T0, 0.25 * T0, 0.0], atol=1e-15)
    for xi in x:
        assert C.floor_at(xi, T0) == pytest.approx(thickness_floor(np.array([xi]), T0)[0],
                                                   abs=1e-15)
    st = C.floor_stations()
    assert st.size == C.FLOOR_STATIONS + C.FLOOR_TAIL
    assert np.all(np.diff(st) > 0)
    design = st[: C.FLOOR_STATIONS]
    assert design[0] == C.FLOOR_START and design[-1] == C.FLOOR_END
    for corner in (C.FLOOR_NOSE, C.FLOOR_TAPER):  # the corners are stations
        assert np.min(np.abs(design - corner)) < 1e-15
    np.testing.assert_allclose(1.0 - st[C.FLOOR_STATIONS:],
                               (1.0 - C.FLOOR_END) * 0.5 ** np.arange(1, C.FLOOR_TAIL + 1))
    assert 1.0 - st[-1] < 1e-5  # the tail reaches where the edge's own expansion takes over


def test_floor_margin_is_exact_at_the_stations():
    """The compiled kernel's least clearance equals the numpy route's exact points (Newton in
    numpy, from the sampled contour) to round-off, on sections near and far from the floor."""
    near = _around(ON_FLOOR, 2e-4, 40, 1)
    # a 12 % section (invented, studies/example-section.toml), far above the floor
    far = SectionSet(np.array([[-0.075 + 0.038j, 0.004 - 0.003j, -0.001 + 0.0008j]]),
                     np.radians([10.0]))
    for sec, t0 in ((near, T0), (far, T0), (ON_FLOOR, 0.0001)):
        status, margin = _validity(sec, t0)
        ok = status == Status.OK
        assert ok.sum() >= min(10, len(sec))
        ref, where = floor_clearance(sec, t0)
        # exact where within a tenth of the floor, a lower bound (from the samples) above it
        close = ok & (ref < 0.1 * t0)
        np.testing.assert_allclose(margin[close], ref[close], atol=1e-12)
        assert np.all(margin[ok] <= ref[ok] + 1e-12)
        assert np.all(margin[ok & ~close] >= 0.1 * t0)
        assert np.all(np.isnan(margin[~ok]))
    assert np.sum(_validity(near, T0)[1] < 0.1 * T0) >= 10  # the exact branch was exercised
    # the design near the floor: within a ten-thousandth of a chord, at the station x/c 0.935
    st, m = _validity(ON_FLOOR, T0)
    assert st[0] == Status.OK and 0.0 < m[0] < 1e-4
    assert floor_clearance(ON_FLOOR, T0)[1][0] == pytest.approx(0.935, abs=1e-12)
    # no floor: no margin figure, the same section valid
    st0, m0 = _validity(ON_FLOOR, 0.0)
    assert st0[0] == Status.OK and np.isnan(m0[0])


def test_floor_is_certified_between_the_stations():
    """Sections around the floor: every one accepted clears the floor at its stations and half
    of it everywhere between (dense sampling), and every one refused as below the floor is
    below it at a station or below half of it somewhere (a true witness)."""
    sec = _around(ON_FLOOR, 6e-4, 60, 2)
    status, _ = _validity(sec, T0)
    below = status == Status.BELOW_FLOOR
    ok = status == Status.OK
    assert ok.sum() >= 5 and below.sum() >= 5, np.bincount(status)
    x = np.concatenate([np.linspace(C.FLOOR_START, C.FLOOR_END, 6000),
                        1.0 - np.geomspace(1.0 - C.FLOOR_END, 5e-6, 400)])
    t = _dense_thickness(sec, x)
    half = 0.5 * thickness_floor(x, T0)
    # accepted: at least half the floor everywhere (sampling error of the interpolation ~1e-9)
    assert np.all(t[ok] - half >= -1e-8)
    st = C.floor_stations()
    t_st = _dense_thickness(sec, st)
    assert np.all(t_st[ok] - thickness_floor(st, T0) >= -1e-8)
    # refused: a witness exists
    short_at_station = np.any(t_st - thickness_floor(st, T0) < 1e-8, axis=1)
    short_between = np.any(t - half < 1e-8, axis=1)
    assert np.all((short_at_station | short_between)[below])


def _floor_check(sec: SectionSet, t0: float, stations: np.ndarray):
    """The kernel's floor certificate on one section with stations of the test's choosing."""
    p = 256
    phis = C._grid_phi(p)
    zeta = np.exp(1j * phis)
    a = sec.coefficients[0]
    a0, k, consts, gs, es, hs, zs, dzs, q2s, oks, zmins, kzs, dlogs, gds = C._prepare(
        a, float(sec.te_angle[0]), zeta)
    phi_le, z_le = C._frame(a, a0, k, phis, zs)
    scale = 1.0 / (k - z_le)
    keys, yk, pk, dk = np.empty(p + 3), np.empty(p + 3), np.empty(p + 3), np.empty(p + 3)
    nk = C._contour_keys(phis, zs, dzs, phi_le, z_le, scale, keys, yk, pk, dk)
    free = np.array([1.0, 0.0, 1.0, 0.0])
    code, margin = C._floor_check(a, a0, k, consts, z_le, scale, keys[:nk], yk[:nk], pk[:nk],
                                  dk[:nk],
                                  phi_le, t0,
                                  np.asarray(stations, dtype=float), np.empty((8, 8192)), free,
                                  (dzs, q2s, oks, zmins, kzs), np.empty(p))
    return code, margin, free


def test_the_certificate_finds_what_the_stations_miss():
    """With stations too sparse to see the pinch at x/c 0.9 (at 0.8 and 0.98 the section
    clears a floor of 0.002 c), the certificate between them halves its way to the pinch and
    refuses the section; with the default stations it is refused at a station."""
    sparse = np.concatenate([[0.005, 0.3, 0.6, 0.8, 0.98], C.floor_stations()[C.FLOOR_STATIONS:]])
    code, margin, _ = _floor_check(PINCHED, 0.002, sparse)
    assert code == Status.BELOW_FLOOR
    code, _, _ = _floor_check(PINCHED, 0.0, sparse)  # no floor: positive thickness certified
    assert code == Status.OK
    code, margin, free = _floor_check(ON_FLOOR, 0.002, sparse)
    assert code == Status.OK and margin > 0.0
    assert 0.0 < free[0] < free[1] < free[2] < free[3] < 2 * np.pi  # the stretch shown apart


def test_a_pinched_tail_is_refused_by_the_floor():
    """The section a first search converged on without a floor (its surfaces about 1e-5 c
    apart near x/c 0.9, a sheet behind x/c 0.85) is valid without the floor and below it
    with; its thickness there, by dense sampling, is indeed below the floor."""
    status, _ = _validity(PINCHED, 0.0)
    assert status[0] == Status.OK
    status, _ = _validity(PINCHED, T0)
    assert status[0] == Status.BELOW_FLOOR
    an = analyse(PINCHED, cl=0.6, floor=T0)
    assert an.evaluation.status[0] == Status.BELOW_FLOOR and np.isnan(an.evaluation.cl[0])
    x = np.linspace(0.85, 0.95, 200)
    assert _dense_thickness(PINCHED, x).min() < 1e-4


def test_a_crossing_needs_a_witness():
    """Every section refused as crossed has a point where the upper surface lies below the
    lower one (dense sampling to within 1e-7 of the edge); none is refused as crossed that is
    not."""
    rng = np.random.default_rng(4)
    fam = []
    for tau in (0.0, 8.0):
        base = np.array([-0.04 + 0.04j, 0.0, 0.0, 0.0, 0.0, 0.0])  # thin: some cross
        c = base + 0.02 / np.arange(1, 7) * (rng.standard_normal((40, 6))
                                              + 1j * rng.standard_normal((40, 6)))
        fam.append(SectionSet(c, np.radians(np.full(40, tau))))
    for sec in fam:
        status, _ = _validity(sec, 0.0)
        crossed = np.where(status == Status.NEGATIVE_THICKNESS)[0]
        assert crossed.size >= 1, np.bincount(status)
        x = np.concatenate([np.linspace(0.002, 0.99, 4000), 1.0 - np.geomspace(0.01, 1e-7, 800)])
        t = _dense_thickness(sec, x)
        assert np.all(t[crossed].min(axis=1) < 0.0)


def test_a_certificate_that_gives_up_has_its_own_status():
    # the one-to-one check runs out of arcs on a cusp tangent to second order
    st, _ = _validity(TANGENT_CUSP, 0.0)
    assert st[0] == Status.UNCERTIFIED
    assert analyse(TANGENT_CUSP, cl=0.2).evaluation.status[0] == Status.UNCERTIFIED
    status, fig, peaks, _ = C.search_batch(TANGENT_CUSP.coefficients, TANGENT_CUSP.te_angle,
                                           np.array([0.2]), 256, 0.95, 0.02, 0.9, np.zeros(0),
                                           0, 0.0, C.PEAK_TOLERANCE, False, T0)
    assert status[0] == Status.UNCERTIFIED and np.all(np.isnan(fig[0])) and np.isnan(peaks[0])
    # the peak's certificate, starved of arc evaluations, gives up: never a pass
    args = (ON_FLOOR.coefficients, ON_FLOOR.te_angle, np.array([0.6]), 256, 0.95, 0.02, 0.9,
            np.zeros(0), 0, 0.0, C.PEAK_TOLERANCE, False, T0)
    full = C.search_batch(*args)
    assert full[0][0] == Status.OK
    starved = C.search_batch(*args, 1)
    assert starved[0][0] == Status.UNCERTIFIED and np.isnan(starved[2][0])
    an = analyse(ON_FLOOR, cl=0.6)
    flow = flow_at_cl(ON_FLOOR, an.frame, 0.6)
    q, _, cert = certified_peak(ON_FLOOR, flow)
    assert cert[0] and q[0] ** 2 - 1.0 == pytest.approx(full[2][0], rel=1e-9)
    q1, _, c1 = C.peak_batch(ON_FLOOR.coefficients, ON_FLOOR.te_angle,
                             np.asarray(flow.alpha_circle), 256, C.PEAK_TOLERANCE, 1)
    assert not c1[0]


def test_false_rejections_are_few():
    """Simple sections refused unproven: none with a finite edge angle, a few among cusps built
    to lie close to crossing (docs/method.md)."""
    rng = np.random.default_rng(6)
    for tau, most in ((10.0, 0), (0.0, 4)):
        base = np.array([-0.08 + 0.04j, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0])
        size = 0.006 if tau == 0.0 else 0.02
        c = base + size / np.arange(1, 9) * (rng.standard_normal((60, 8))
                                             + 1j * rng.standard_normal((60, 8)))
        status, _ = _validity(SectionSet(c, np.radians(np.full(60, tau))), 0.0)
        assert np.sum(status == Status.UNCERTIFIED) <= most, np.bincount(status)
        assert np.sum(status == Status.OK) >= 30
