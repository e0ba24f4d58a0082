"""Full evaluation of a batch of sections: map, validity, flow, peak suction, moment, geometry
and the recovery proxies, in one vectorised pass.

This is the kernel a search calls once per generation; :func:`evaluate` returns one
:class:`Evaluation` whose arrays all have shape (B,).  Invalid candidates get a status code and
NaN figures; nothing here raises for a bad shape.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from foilmap.section import _compiled
from foilmap.section._kconst import (
    DEFAULT_PROXY_END,
    FIGURES,
    PROXY_BITS,
    PROXY_CLOSE_LIMIT,
    TRAILING_EDGE_SPEED,
)
from foilmap.section.conformal import (
    DEFAULT_CRITICAL_MARGIN,
    DEFAULT_SINGULAR_MARGIN,
    CircleGrid,
    SectionSet,
    map_at,
    map_on_grid,
)
from foilmap.section.flow import (
    FlowState,
    flow_at_alpha,
    flow_at_cl,
    max_ideal_cl,
    certified_peak,
    moment_quarter_chord,
    speed_on_circle,
    surface_speed,
    zero_lift_angle,
)
from foilmap.section.geometry import (
    ChordFrame,
    SurfaceSplit,
    chord_frame,
    coordinates,
    section_geometry,
    split_surfaces,
    station_thickness,
)
from foilmap.section.proxies import recovery_severity, stratford, thwaites
from foilmap.section.status import Status
from foilmap.section.surfaces import surfaces_from_stagnation

__all__ = [
    "Evaluation",
    "Analysis",
    "SearchFigures",
    "evaluate",
    "analyse",
    "search_figures",
    "surface_distribution",
    "speed_at_stations", "surfaces_on_grid", "DEFAULT_SAMPLES", "DEFAULT_POINTS",
    "DEFAULT_PROXY_END", "TRAILING_EDGE_SPEED", "PROXIES", "ROUTES"]

#: circle-plane samples per section in searches (peak suction is refined beyond the grid)
DEFAULT_SAMPLES = 256
#: the former name of :data:`DEFAULT_SAMPLES`
DEFAULT_POINTS = DEFAULT_SAMPLES
#: proxy names accepted by :func:`evaluate`
PROXIES = tuple(name for name, _ in PROXY_BITS)
#: the two routes of :func:`search_figures`: the compiled kernel and the numpy reference
ROUTES = ("compiled", "reference")


@dataclass(frozen=True)
class Evaluation:
    """Figures of a batch of sections at one operating point, arrays of shape (B,).

    Angles are in radians here (the CLI and files convert to degrees); lengths in chords;
    Cm about the quarter chord, nose-up positive.  Proxy fields are NaN when not requested.
    """

    status: np.ndarray
    cl: np.ndarray
    alpha: np.ndarray
    alpha_zero_lift: np.ndarray
    lift_slope: np.ndarray
    cl_max_ideal: np.ndarray
    cm_quarter_chord: np.ndarray
    cp_min: np.ndarray
    cp_min_x: np.ndarray
    cp_min_upper: np.ndarray  # True where the peak suction is on the upper surface
    thickness: np.ndarray
    thickness_x: np.ndarray
    camber: np.ndarray
    camber_x: np.ndarray
    le_radius: np.ndarray
    te_angle: np.ndarray
    area: np.ndarray
    severity: np.ndarray
    thwaites_sep_x_upper: np.ndarray
    thwaites_sep_x_lower: np.ndarray
    thwaites_min_lambda: np.ndarray
    stratford_margin: np.ndarray
    stratford_sep_x_upper: np.ndarray
    stratford_sep_x_lower: np.ndarray
    #: least (local thickness − floor) over the floor's stations, chords; NaN without a floor
    floor_margin: np.ndarray

    def __len__(self) -> int:
        return self.status.shape[0]

    @property
    def ok(self) -> np.ndarray:
        return self.status == Status.OK

    @classmethod
    def from_figures(cls, status: np.ndarray, figures: np.ndarray) -> "Evaluation":
        """From the compiled kernel's output: status (B,) and figures (B, F) in the order of
        :data:`foilmap.section._kconst.FIGURES`."""
        cols = {name: figures[:, i].copy() for i, name in enumerate(FIGURES)}
        cols["cp_min_upper"] = cols["cp_min_upper"] == 1.0
        return cls(status=status.astype(np.int8), **cols)


def _x_at(surface, s_query: np.ndarray) -> np.ndarray:
    """Chord station at arc length ``s_query`` (B,) along a surface (NaN passes through; past
    the last sample, the trailing edge x = 1)."""
    nb = s_query.shape[0]
    r = np.arange(nb)
    reach = surface.mask & (surface.s >= s_query[:, None])
    j = np.argmax(reach, axis=1)
    jm = np.where(surface.mask[r, np.maximum(j - 1, 0)] & (j > 0), j - 1, j)
    s0, s1 = surface.s[r, jm], surface.s[r, j]
    x0, x1 = surface.x[r, jm], surface.x[r, j]
    with np.errstate(all="ignore"):
        frac = np.where(s1 > s0, (s_query - s0) / (s1 - s0), 0.0)
    x = np.where(reach.any(axis=1), x0 + frac * (x1 - x0), 1.0)  # beyond the samples: the TE
    return np.where(np.isfinite(s_query), x, np.nan)


def evaluate(sections: SectionSet, **kwargs) -> Evaluation:
    """Evaluate a batch of sections at a target Cl or at an angle of attack.

    Keyword arguments as :func:`analyse`; returns only the figures.
    """
    return analyse(sections, **kwargs).evaluation


@dataclass(frozen=True)
class Analysis:
    """An evaluation together with the state it was computed from, for tables and plots."""

    sections: SectionSet
    evaluation: Evaluation
    frame: ChordFrame
    flow: FlowState
    split: SurfaceSplit
    grid: CircleGrid | None = None
    map_values: object = None
    line: ChordFrame | None = None  # the chord line of angles, Cl and Cm (None: ``frame``)

    @property
    def angle_frame(self) -> ChordFrame:
        """The frame angles, Cl and Cm are measured in: the section's reference chord line
        (a fitted section's source line) or its own."""
        return self.frame if self.line is None else self.line

    def peak_suction_at(self, cl) -> tuple[np.ndarray, np.ndarray]:
        """Peak suction −Cp_min and status at another lift coefficient, reusing the map.

        The geometry and the map do not depend on incidence, so only the flow and the refined
        peak are computed: returns ``(peak_suction, status)``, shapes (B,); NaN and
        ABOVE_MAX_LIFT where the section cannot reach ``cl``, and the original status where
        the section itself is invalid.
        """
        fl = flow_at_cl(self.sections, self.angle_frame, cl)
        status = np.where(self.evaluation.status == Status.OK, fl.status,
                          self.evaluation.status).astype(np.int8)
        with np.errstate(all="ignore"):
            q_pk, _, cert = certified_peak(self.sections, _valid_only(fl, status),
                                           self.grid.samples)
        status = np.where((status == Status.OK) & ~cert, Status.UNCERTIFIED,
                          status).astype(np.int8)
        peak = np.where(status == Status.OK, q_pk**2 - 1.0, np.nan)
        return peak, status


def analyse(
    sections: SectionSet,
    *,
    cl=None,
    alpha=None,
    samples: int = DEFAULT_SAMPLES,
    proxies: tuple[str, ...] = ("severity",),
    reynolds: float | None = None,
    proxy_end: float = DEFAULT_PROXY_END,
    critical_margin: float = DEFAULT_CRITICAL_MARGIN,
    singular_margin: float = DEFAULT_SINGULAR_MARGIN,
    reference_le=None,
    floor: float = 0.0,
    points: int | None = None,
) -> Analysis:
    """Evaluate a batch of sections at a target Cl or at an angle of attack.

    Parameters
    ----------
    sections : SectionSet
        B candidates with N coefficients each.
    cl : float or ndarray (B,), optional
        Target lift coefficient, met exactly by the closed-form angle.
    alpha : float or ndarray (B,), optional
        Angle of attack to the chord line in radians (exactly one of ``cl`` and ``alpha``).
    samples : int
        Circle-plane samples per section (``points``, its former name, is still accepted).
    proxies : tuple of str
        Recovery proxies to compute, from :data:`PROXIES`; ``stratford`` needs ``reynolds``.
    reynolds : float, optional
        Chord Reynolds number for Stratford's criterion.
    proxy_end : float
        Chord station where the proxies stop (see :data:`DEFAULT_PROXY_END`).
    critical_margin, singular_margin : float
        δ₁ and δ₂ of the validity checks (docs/method.md, "Validity").
    reference_le : complex or ndarray (B,), optional
        The leading-edge end of a reference chord line in the section's own chord frame (a
        fitted section's source line, :class:`~foilmap.store.sectionfile.SectionRecord`):
        angles, Cl, the lift slope, the zero-lift angle and Cm c/4 are then measured from the
        line from this point to the trailing edge.  Geometry and stations stay in the own frame.
        Not given: the own chord line (the kernel takes its lines explicitly; the public calls
        of :mod:`foilmap.api` pass a fitted section's own).
    """
    if (cl is None) == (alpha is None):
        raise ValueError("give exactly one of cl and alpha")
    unknown = set(proxies) - set(PROXIES)
    if unknown:
        raise ValueError(f"unknown proxies {sorted(unknown)}; allowed: {', '.join(PROXIES)}")
    if "stratford" in proxies and reynolds is None:
        raise ValueError("the stratford proxy needs a Reynolds number")
    nb = len(sections)
    if points is not None:
        samples = points
    grid = CircleGrid.get(samples, max(sections.n_coefficients, 1))
    with np.errstate(all="ignore"):
        # validity certified between samples (the compiled checks: critical points, star shape,
        # the second singular point, a simple contour, single-valued surfaces)
        status, floor_margin = _compiled.validity_batch(
            np.ascontiguousarray(sections.coefficients), sections.te_angle, samples,
            1.0 - critical_margin, singular_margin, float(floor))
        mv = map_on_grid(sections, grid)
        frame = chord_frame(sections, mv, grid)
        zc = frame.to_chord(mv.z)
        split = split_surfaces(zc, grid.phi, frame.phi_le)
        geom = section_geometry(sections, mv, grid, frame, split, zc=zc)
        line = None if reference_le is None else frame.rebased(
            np.broadcast_to(np.asarray(reference_le, dtype=complex), (nb,)), sections.k)
        aframe = frame if line is None else line
        flow = flow_at_cl(sections, aframe, cl) if cl is not None else flow_at_alpha(
            sections, aframe, alpha
        )
        status = np.where(status == Status.OK, flow.status, status).astype(np.int8)
        q = surface_speed(flow, mv, grid)
        q_pk, phi_pk, certified = certified_peak(sections, _valid_only(flow, status), samples)
        status = np.where((status == Status.OK) & ~certified, Status.UNCERTIFIED,
                          status).astype(np.int8)
        phi_pk = np.where(np.isfinite(phi_pk), phi_pk, 0.0)
        zpk = frame.to_chord(map_at(sections, np.exp(1j * phi_pk)[:, None]).z)[:, 0]
        cm = moment_quarter_chord(sections, aframe, flow)
        nan = np.full(nb, np.nan)
        severity = nan.copy()
        th_up, th_lo, th_min = nan.copy(), nan.copy(), nan.copy()
        st_m, st_up, st_lo = nan.copy(), nan.copy(), nan.copy()
        if proxies:
            upper, lower = surfaces_from_stagnation(flow, mv, grid, frame, q)
            masks = [sf.until(proxy_end) for sf in (upper, lower)]
            ends = [sf.end_state(mk) for sf, mk in zip((upper, lower), masks)]
            # Kutta: both surfaces reach one trailing-edge pressure, and in real flow that is
            # slightly above free stream: the recovery still owed at the end station is charged
            # to reach the lowest of the two end speeds and TRAILING_EDGE_SPEED
            u_te = np.minimum(np.minimum(ends[0][1], ends[1][1]), TRAILING_EDGE_SPEED)
            closing = [None, None] if proxy_end >= PROXY_CLOSE_LIMIT else [
                (e[0], e[1], sf.s_te, u_te) for e, sf in zip(ends, (upper, lower))]
            if "severity" in proxies:
                severity = np.maximum(
                    *(recovery_severity(sf.s, sf.u, sf.du_ds, mk, cl_)
                      for sf, mk, cl_ in zip((upper, lower), masks, closing))
                )
            if "thwaites" in proxies:
                tu, tl = (
                    thwaites(sf.s, sf.u, sf.du_ds, mk, sf.integral0)
                    for sf, mk in zip((upper, lower), masks)
                )
                th_up = _x_at(upper, tu.separation_s)
                th_lo = _x_at(lower, tl.separation_s)
                th_min = np.fmin(tu.min_lambda, tl.min_lambda)
            if "stratford" in proxies:
                su, sl = (
                    stratford(sf.s, sf.u, sf.du_ds, mk, float(reynolds), cl_)
                    for sf, mk, cl_ in zip((upper, lower), masks, closing)
                )
                st_m = np.fmax(su.margin, sl.margin)
                st_up = _x_at(upper, su.separation_s)
                st_lo = _x_at(lower, sl.separation_s)
        cp_min = 1.0 - q_pk**2
        values = dict(
            cl=flow.cl,
            alpha=flow.alpha,
            alpha_zero_lift=zero_lift_angle(sections, aframe),
            lift_slope=flow.lift_slope,
            cl_max_ideal=max_ideal_cl(sections, aframe),
            cm_quarter_chord=cm,
            cp_min=cp_min,
            cp_min_x=zpk.real,
            thickness=geom.thickness,
            thickness_x=geom.thickness_x,
            camber=geom.camber,
            camber_x=geom.camber_x,
            le_radius=geom.le_radius,
            te_angle=sections.te_angle.copy(),
            area=geom.area,
            severity=severity,
            thwaites_sep_x_upper=th_up,
            thwaites_sep_x_lower=th_lo,
            thwaites_min_lambda=th_min,
            stratford_margin=st_m,
            stratford_sep_x_upper=st_up,
            stratford_sep_x_lower=st_lo,
            floor_margin=floor_margin,
        )
        core = ("cl", "alpha", "cm_quarter_chord", "cp_min", "thickness", "le_radius")
        finite = np.all([np.isfinite(values[n]) for n in core], axis=0)
        status = np.where((status == Status.OK) & ~finite, Status.NON_FINITE, status)
        bad = status != Status.OK
        for name, v in values.items():
            v = np.array(v, dtype=float)
            v[bad] = np.nan
            values[name] = v
    upper_pk = (phi_pk % (2.0 * np.pi)) < frame.phi_le
    ev = Evaluation(status=status.astype(np.int8), cp_min_upper=upper_pk & ~bad, **values)
    return Analysis(sections, ev, frame, flow, split, grid, mv, line)


def _valid_only(flow: FlowState, status: np.ndarray) -> FlowState:
    """The flow with its angle NaN where the candidate is invalid (no certification spent)."""
    from dataclasses import replace

    return replace(flow, alpha_circle=np.where(status == Status.OK, flow.alpha_circle, np.nan))


@dataclass(frozen=True)
class SearchFigures:
    """What a search needs of a batch of sections at one operating point.

    ``evaluation`` holds the figures at the design Cl (the first of ``cls``), its status
    covering every Cl of the point; ``peak`` (B,) is the largest peak suction −Cp_min over the
    Cls (certified); ``station_thickness`` (B, M) the exact thickness at the chord stations
    asked for.  ``analysis`` is the reference route's :class:`Analysis` (None on the compiled
    route), for figures beyond these (the screening's drag, a target's Cp).
    """

    evaluation: Evaluation
    peak: np.ndarray
    station_thickness: np.ndarray
    analysis: Analysis | None = None


def search_figures(
    sections: SectionSet,
    cls,
    *,
    samples: int = DEFAULT_SAMPLES,
    proxies: tuple[str, ...] = ("severity",),
    reynolds: float | None = None,
    proxy_end: float = DEFAULT_PROXY_END,
    stations=(),
    floor: float = 0.0,
    design_peak: bool = False,
    route: str = "compiled",
) -> SearchFigures:
    """Figures of a batch of sections over the lift coefficients ``cls`` (the design Cl first,
    then the other Cls of the point, whose peaks count): the one entry point of search-time
    evaluation, with both routes behind it.

    ``route="compiled"``: the numba kernel (:func:`foilmap.section._compiled.search_batch`), one
    pass per section; without ``design_peak`` only the largest peak over the Cls is certified,
    and the design Cl's own peak figures (``cp_min``, ``cp_min_x``, ``cp_min_upper``) are NaN.
    ``route="reference"``: :func:`analyse` at the design Cl and the peak at each other Cl
    (:meth:`Analysis.peak_suction_at`), returning the analysis too.  The two give the same
    figures (tests/test_certified.py).  ``samples`` circle samples, ``proxies`` from
    :data:`PROXIES` (``stratford`` needs ``reynolds``), ``proxy_end`` where they stop,
    ``stations`` (M,) chord stations of exact thickness, ``floor`` the local-thickness floor t₀
    in chords (0: none).
    """
    if route not in ROUTES:
        raise ValueError(f"route must be one of {', '.join(ROUTES)}, not {route!r}")
    cls = np.atleast_1d(np.asarray(cls, dtype=float))
    xs = np.asarray(stations, dtype=float).reshape(-1)
    if route == "compiled":
        want = sum(bit for name, bit in PROXY_BITS if name in proxies)
        status, fig, peaks, st = _compiled.search_batch(
            np.ascontiguousarray(sections.coefficients), np.ascontiguousarray(sections.te_angle),
            cls, int(samples), 1.0 - DEFAULT_CRITICAL_MARGIN, DEFAULT_SINGULAR_MARGIN,
            float(proxy_end), xs, want, float(reynolds or 0.0), _compiled.PEAK_TOLERANCE,
            bool(design_peak), float(floor))
        return SearchFigures(Evaluation.from_figures(status, fig), peaks, st)
    from dataclasses import replace

    an = analyse(sections, cl=float(cls[0]), samples=samples, proxies=proxies,
                 reynolds=reynolds, proxy_end=proxy_end, floor=floor)
    ev = an.evaluation
    status = ev.status.copy()
    peak = -ev.cp_min
    for cl in cls[1:]:
        other, stc = an.peak_suction_at(float(cl))
        status = np.where(status == Status.OK, stc, status).astype(np.int8)
        peak = np.fmax(peak, other)
    if xs.size:
        with np.errstate(all="ignore"):
            st = station_thickness(sections, an.frame, an.split, xs)
    else:
        st = np.zeros((len(sections), 0))
    return SearchFigures(replace(ev, status=status), peak, st, an)


def speed_at_stations(analysis: Analysis, x, surface: str = "upper") -> np.ndarray:
    """Speed ratio q = V/V∞ at chord stations ``x`` (M,) on one surface, shape (B, M).

    The points are exact contour points (Newton on the map), so the speed is exact there.  At
    the trailing edge itself (x ≥ 1) the speed is its limit: 0 at a finite edge angle (the
    stagnation point), and at a cusp the limit along the surface (taken 1e-9 c before it).
    """
    from foilmap.section.geometry import exact_points_at_x

    if surface not in ("upper", "lower"):
        raise ValueError(f"surface must be 'upper' or 'lower', not {surface!r}")
    x = np.asarray(x, dtype=float)
    at_te = x >= 1.0
    x = np.where(at_te, 1.0 - 1e-9, x)
    keys = -x if surface == "upper" else x
    sec, fl = analysis.sections, analysis.flow
    with np.errstate(all="ignore"):
        _, phi = exact_points_at_x(sec, analysis.frame, analysis.split, keys, return_phi=True)
        q = speed_on_circle(fl, phi, map_at(sec, np.exp(1j * phi)).dz)
    finite_angle = (sec.te_angle > 0.0)[:, None]
    return np.where(at_te[None, :] & finite_angle, 0.0, q)


def surface_distribution(analysis: Analysis, points: int = 201, spacing: str = "cosine"):
    """Surface points with their speed ratio, from the TE over the upper surface and back.

    Returns ``(zc, upper, q)``, shapes (B, points): chord-frame points (as in
    :func:`~foilmap.section.geometry.coordinates`), True on the upper surface, and q = V/V∞
    (Cp = 1 − q²).  At the trailing edge q is 0 for a finite angle (a stagnation point) and the
    common limit of both surfaces for a cusp.
    """
    sec, frame, flow = analysis.sections, analysis.frame, analysis.flow
    zc, phi = coordinates(sec, frame, analysis.split, points, spacing, return_phi=True)
    te = np.zeros_like(phi, dtype=bool)
    te[:, 0] = te[:, -1] = True
    cusp = sec.te_angle[:, None] == 0.0
    phi_eval = np.where(te, np.where(np.arange(points)[None, :] == 0, 1e-6, -1e-6), phi)
    q = speed_on_circle(flow, phi_eval, map_at(sec, np.exp(1j * phi_eval)).dz)
    q = np.where(te & ~cusp, 0.0, q)
    upper = phi <= frame.phi_le[:, None]  # the LE row counts as upper
    return zc, upper, q


def surfaces_on_grid(analysis: Analysis, samples: int):
    """Both surfaces from the stagnation point (:class:`~foilmap.section.surfaces.Surface`),
    with the exact surface speed on a circle grid of ``samples`` samples: the input of the
    boundary-layer screening and of the exported surface tables."""
    sec = analysis.sections
    grid = CircleGrid.get(samples, max(sec.n_coefficients, 1))
    mv = map_on_grid(sec, grid)
    q = surface_speed(analysis.flow, mv, grid)
    return surfaces_from_stagnation(analysis.flow, mv, grid, analysis.frame, q)
