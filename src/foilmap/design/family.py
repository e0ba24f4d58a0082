"""Section families along a span: stations designed together, exact and fair in between.

A family is a list of span stations (positions 0 root … 1 tip), each an exact section: its
shape-series coefficients A_n and its trailing-edge angle τ.  Between the stations every
coefficient component and τ follow a rule of the position s:

- ``pchip``: a monotone piecewise cubic Hermite interpolant (Fritsch & Carlson 1980, SIAM J.
  Numer. Anal. 17(2), 238–246; the derivative rule of Fritsch & Butland 1984), C¹ through the
  stations and with no overshoot of any component between two stations;
- ``linear``: straight lines between stations (C⁰: the loft kinks at the stations).

So every in-between section is itself an exact section with exact figures.  Evaluated in the
form ``y_k + (y_{k+1} − y_k)·h01 + h·(h10·m_k + h11·m_{k+1})``, the rule returns a station's
values bit for bit at its position and a constant component exactly where two stations agree.

A family study searches all the stations' coefficients at once (:class:`FamilyProblem`): the
objective is the weighted sum of the stations' objectives; each station meets its constraints;
at ``checks`` positions inside each interval the section must be valid (certified like any
other), meet the constraints interpolated from the interval's two stations and be *fair*:
the maximum thickness and the maximum camber change monotonically along the interval wherever
the two stations' values differ by more than ``fair_tolerance`` (else they stay within
``fair_tolerance`` of the first station's value).
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from functools import cached_property

import numpy as np

from foilmap.design.problem import Outcome, Problem
from foilmap.design.study import Parametrisation, Point, RunSpec, Station, Study
from foilmap.section.status import Status

__all__ = [
    "Family",
    "FamilyParam",
    "FamilyProblem",
    "build_problem",
    "interpolate",
    "interpolate_point",
    "interpolate_constraints",
    "check_positions",
    "fairness",
    "RULES",
]

#: how coefficients vary between stations
RULES = ("pchip", "linear")
#: typical size of a fairness constraint (chords), for the search's scaling
FAIR_SCALE = 1e-3


# --- the rule between stations ------------------------------------------------------------------


def _pchip_slopes(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Derivatives dy/dx at the knots, shape of ``y`` (knots along axis 0): the weighted
    harmonic mean of the neighbouring secants where they agree in sign, else 0 (Fritsch &
    Butland 1984); the ends by the three-point formula, limited so as not to overshoot."""
    h = np.diff(x).reshape((-1,) + (1,) * (y.ndim - 1))
    delta = np.diff(y, axis=0) / h
    m = np.zeros_like(y)
    if y.shape[0] == 2:
        m[0] = m[1] = delta[0]
        return m
    w1 = 2.0 * h[1:] + h[:-1]
    w2 = h[1:] + 2.0 * h[:-1]
    d0, d1 = delta[:-1], delta[1:]
    same = (np.sign(d0) * np.sign(d1)) > 0
    with np.errstate(divide="ignore", invalid="ignore"):
        hm = (w1 + w2) / (w1 / np.where(same, d0, 1.0) + w2 / np.where(same, d1, 1.0))
    m[1:-1] = np.where(same, hm, 0.0)
    for end, (hh0, hh1, dd0, dd1) in ((0, (h[0], h[1], delta[0], delta[1])),
                                      (-1, (h[-1], h[-2], delta[-1], delta[-2]))):
        d = ((2.0 * hh0 + hh1) * dd0 - hh0 * dd1) / (hh0 + hh1)
        d = np.where(np.sign(d) != np.sign(dd0), 0.0, d)
        d = np.where((np.sign(dd0) != np.sign(dd1)) & (np.abs(d) > np.abs(3.0 * dd0)),
                     3.0 * dd0, d)
        m[end] = d
    return m


def interpolate(positions, values, at, rule: str = "linear") -> np.ndarray:
    """Values of the rule at span positions ``at`` (M,): ``values`` has the stations along
    axis 0 (S, ...), real or complex; returns (M, ...).  Exact at the stations (bit for bit)."""
    x = np.asarray(positions, dtype=float)
    y = np.asarray(values)
    at = np.atleast_1d(np.asarray(at, dtype=float))
    if np.iscomplexobj(y):
        return interpolate(x, y.real, at, rule) + 1j * interpolate(x, y.imag, at, rule)
    y = y.astype(float)
    k = np.clip(np.searchsorted(x, at, side="right") - 1, 0, len(x) - 2)
    h = (x[k + 1] - x[k])
    t = ((at - x[k]) / h).reshape((-1,) + (1,) * (y.ndim - 1))
    y0, y1 = y[k], y[k + 1]
    if rule == "linear":
        out = y0 + (y1 - y0) * t
    else:
        m = _pchip_slopes(x, y)
        hh = h.reshape(t.shape)
        h01 = t * t * (3.0 - 2.0 * t)
        h10 = t * (1.0 - t) ** 2
        h11 = t * t * (t - 1.0)
        out = y0 + (y1 - y0) * h01 + hh * (h10 * m[k] + h11 * m[k + 1])
    exact = np.flatnonzero(np.isin(at, x))  # at a station: its own values, bit for bit
    for i in exact:
        out[i] = y[int(np.flatnonzero(x == at[i])[0])]
    return out


def check_positions(positions, checks: int) -> np.ndarray:
    """The in-between positions checked: ``checks`` evenly inside each interval, (S−1)·checks."""
    x = np.asarray(positions, dtype=float)
    u = np.arange(1, checks + 1) / (checks + 1)
    return np.concatenate([x[i] + (x[i + 1] - x[i]) * u for i in range(len(x) - 1)])


def _lerp(a, b, u):
    return None if a is None or b is None else float(a + (b - a) * u)


def interpolate_point(a: Point, b: Point, u: float, name: str) -> Point:
    """The operating point a fraction ``u`` of the way from station ``a`` to station ``b``:
    Cl, Reynolds number, Mach number and cavitation number linear in the span position (a
    figure only one of the two gives is not interpolated)."""
    rng = None
    if a.cl_range is not None and b.cl_range is not None:
        rng = (_lerp(a.cl_range[0], b.cl_range[0], u), _lerp(a.cl_range[1], b.cl_range[1], u))
    return Point(name, _lerp(a.cl, b.cl, u), rng, _lerp(a.reynolds, b.reynolds, u),
                 _lerp(a.mach, b.mach, u), a.compressibility, _lerp(a.sigma, b.sigma, u))


def interpolate_constraints(ca: dict, cb: dict, u: float) -> dict:
    """Constraints between two stations: every key both give, linear in the span position
    (numbers, and each end of a [low, high]); ``station_thickness`` where both give the same
    chord stations.  A key only one station gives binds at that station alone."""
    out = {}
    for key in ca.keys() & cb.keys():
        va, vb = ca[key], cb[key]
        if key == "station_thickness":
            if [x for x, _ in va] == [x for x, _ in vb]:
                out[key] = [[x, _lerp(ta, tb, u)] for (x, ta), (_, tb) in zip(va, vb)]
        elif isinstance(va, (list, tuple)):
            out[key] = [_lerp(p, q, u) for p, q in zip(va, vb)]
        else:
            out[key] = _lerp(va, vb, u)
    return out


def fairness(values: np.ndarray, tolerance: float) -> np.ndarray:
    """g ≤ 0 when a schedule is fair over one interval: ``values`` (B, K+2) runs from the
    first station through the K checked positions to the second.  Where the two stations
    differ by more than ``tolerance`` every step goes their way (to within the tolerance);
    where they do not, every value stays within the tolerance of the first."""
    v = np.asarray(values, dtype=float)
    d = v[:, -1] - v[:, 0]
    steps = np.diff(v, axis=1)
    along = np.max(-np.sign(d)[:, None] * steps, axis=1)
    level = np.max(np.abs(v - v[:, :1]), axis=1)
    return np.where(np.abs(d) > tolerance, along, level) - tolerance


# --- a family as an object -----------------------------------------------------------------


@dataclass(frozen=True)
class Family:
    """Stations' exact sections and the rule between them.

    ``coefficients`` (S, N) complex, ``te_angle_deg`` (S,), ``positions`` (S,) increasing.
    """

    names: tuple[str, ...]
    positions: np.ndarray
    coefficients: np.ndarray
    te_angle_deg: np.ndarray
    rule: str = "linear"
    figures: tuple = ()  # per station: dict of its figures (cl, …) as designed, for files
    provenance: dict | None = None

    def __post_init__(self):
        pos = np.asarray(self.positions, dtype=float)
        if pos.ndim != 1 or len(pos) < 2 or np.any(np.diff(pos) <= 0):
            raise ValueError("a family needs two or more stations at increasing positions")
        if self.rule not in RULES:
            raise ValueError(f"rule {self.rule!r} is not one of: {', '.join(RULES)}")

    @property
    def span(self) -> tuple[float, float]:
        return float(self.positions[0]), float(self.positions[-1])

    def check_position(self, pos) -> np.ndarray:
        """Positions as an array, or ValueError naming the allowed range."""
        p = np.atleast_1d(np.asarray(pos, dtype=float))
        lo, hi = self.span
        bad = p[~((p >= lo) & (p <= hi))]
        if bad.size:
            raise ValueError(f"span position {float(bad[0]):g} is outside the family's "
                             f"stations ({lo:g} to {hi:g})")
        return p

    def coefficients_at(self, pos) -> tuple[np.ndarray, np.ndarray]:
        """Coefficients (M, N) and trailing-edge angles in degrees (M,) at span positions."""
        p = self.check_position(pos)
        a = interpolate(self.positions, self.coefficients, p, self.rule)
        tau = interpolate(self.positions, np.asarray(self.te_angle_deg, float), p, self.rule)
        return a, tau

    def section_at(self, pos):
        """The exact section(s) at span position(s) ``pos``: a ``SectionSet`` (at a station's
        position, that station's section bit for bit)."""
        from foilmap.section.conformal import SectionSet

        a, tau = self.coefficients_at(pos)
        return SectionSet(a, np.radians(tau))

    def loft_positions(self, n: int) -> np.ndarray:
        """``n`` ≥ 2 span positions evenly from the first station to the last (the stations'
        own positions are not added)."""
        lo, hi = self.span
        return np.linspace(lo, hi, int(n))


# --- the search over a family -------------------------------------------------------------


@dataclass(frozen=True)
class FamilyParam:
    """Search vectors of a family: the stations' search vectors one after another.

    Every station uses the study's own :class:`Parametrisation`; ``start`` (S, D) holds the
    joint search's starting vectors (the station runs' best, or the shape's start) and
    ``step`` scales the initial step of every coordinate.
    """

    base: Parametrisation
    stations: int
    start: np.ndarray
    step: float = 1.0

    # the attributes of a Parametrisation that the run engine reads
    @property
    def n(self) -> int:
        return self.base.n

    @property
    def symmetric(self) -> bool:
        return self.base.symmetric

    @property
    def tau_free(self) -> bool:
        return self.base.tau_free

    @property
    def dimension(self) -> int:
        return self.stations * self.base.dimension

    def x0(self) -> np.ndarray:
        return np.asarray(self.start, dtype=float).reshape(-1).copy()

    def bounds(self) -> tuple[list, list]:
        lo, hi = self.base.bounds()
        return lo * self.stations, hi * self.stations

    def sigma_scales(self) -> np.ndarray:
        return np.tile(self.base.sigma_scales(), self.stations) * self.step

    def blocks(self, y: np.ndarray) -> np.ndarray:
        """(B, S, D) from (B, S·D)."""
        y = np.atleast_2d(y)
        return y.reshape(y.shape[0], self.stations, self.base.dimension)

    def station_sections(self, y: np.ndarray) -> list:
        """One ``SectionSet`` (B rows) per station."""
        yb = self.blocks(y)
        return [self.base.sections(yb[:, s]) for s in range(self.stations)]

    def sections(self, y: np.ndarray):
        """The stations' sections of one search vector (S rows), as a ``SectionSet``."""
        from foilmap.section.conformal import SectionSet

        secs = self.station_sections(np.atleast_2d(y)[:1])
        return SectionSet(np.concatenate([s.coefficients for s in secs]),
                          np.concatenate([s.te_angle for s in secs]))


@dataclass(frozen=True)
class FamilyProblem:
    """The objectives and constraints of a family's joint search (duck-types :class:`Problem`
    for the search and the run engine)."""

    param: FamilyParam
    stations: tuple[Station, ...]
    station_problems: tuple[Problem, ...]
    check_problems: tuple[Problem, ...]  # one per checked position, interval by interval
    checks: int
    rule: str
    fair_tolerance: float
    objectives: tuple[tuple[str, float], ...]
    epsilon: float | None = None
    reference_point: tuple[float, ...] | None = None
    #: the search ranks candidates by feasibility (see :meth:`evaluate_family`) instead of
    #: handing CMA-ES the constraints for its augmented Lagrangian
    ranks_constraints: bool = True

    @property
    def point(self) -> Point:
        return self.station_problems[0].point

    @property
    def positions(self) -> np.ndarray:
        return np.array([s.position for s in self.stations])

    @property
    def objective_names(self) -> list[str]:
        return [n for n, _ in self.objectives]

    def _intervals(self):
        """(index, label, check problems) per interval."""
        for i in range(len(self.stations) - 1):
            label = f"{self.stations[i].name}-{self.stations[i + 1].name}"
            yield i, label, self.check_problems[i * self.checks:(i + 1) * self.checks]

    @cached_property
    def _columns(self) -> tuple[list[str], list[float]]:
        names, scales = [], []
        for st, pr in zip(self.stations, self.station_problems):
            names += [f"{st.name}:{n}" for n in pr.constraint_names]
            scales += list(pr.constraint_scales)
        for _, label, probs in self._intervals():
            names += [f"{label}:{n}" for n in probs[0].constraint_names]
            scales += list(probs[0].constraint_scales)
            names += [f"{label}:fair_thickness", f"{label}:fair_camber"]
            scales += [FAIR_SCALE, FAIR_SCALE]
        if self.epsilon is not None:
            names.append(f"epsilon_{self.objective_names[1]}")
            scales.append(max(0.05 * abs(self.epsilon), 1e-3))
        return names, scales

    @property
    def constraint_names(self) -> list[str]:
        return list(self._columns[0])

    @property
    def constraint_scales(self) -> np.ndarray:
        return np.array(self._columns[1], dtype=float)

    def evaluate(self, y: np.ndarray) -> Outcome:
        """Objectives and constraints of family search vectors ``y`` (B, S·D)."""
        return self.evaluate_family(self.param.station_sections(y))

    def evaluate_family(self, station_sections: list) -> Outcome:
        """The same for the stations' sections given directly (one ``SectionSet`` each)."""
        from foilmap.section.conformal import SectionSet

        outs = [pr.evaluate_sections(sec)
                for pr, sec in zip(self.station_problems, station_sections)]
        nb = len(station_sections[0])
        coeffs = np.stack([s.coefficients for s in station_sections], axis=0)  # (S, B, N)
        taus = np.stack([s.te_angle for s in station_sections], axis=0)  # (S, B)
        at = check_positions(self.positions, self.checks)
        ca = interpolate(self.positions, coeffs, at, self.rule)  # (M, B, N)
        ta = interpolate(self.positions, taus, at, self.rule)
        inner = [pr.evaluate_sections(SectionSet(ca[m], ta[m]))
                 for m, pr in enumerate(self.check_problems)]

        status = np.full(nb, Status.OK, dtype=np.int8)
        for o in outs + inner:
            status = np.where(status == Status.OK, o.status, status).astype(np.int8)
        weights = np.array([s.weight for s in self.stations])
        raw = np.stack([o.objectives for o in outs], axis=0)  # (S, B, K), NaN where invalid
        obj = np.einsum("s,sbk->bk", weights, raw)
        cols = [o.constraints for o in outs]
        for i, _, probs in self._intervals():
            block = inner[i * self.checks:(i + 1) * self.checks]
            if block[0].constraints.shape[1]:
                cols.append(np.max(np.stack([o.constraints for o in block]), axis=0))
            for field in ("thickness", "camber"):
                seq = [getattr(outs[i].evaluation, field)]
                seq += [getattr(o.evaluation, field) for o in block]
                seq.append(getattr(outs[i + 1].evaluation, field))
                cols.append(fairness(np.stack(seq, axis=1), self.fair_tolerance)[:, None])
        g = np.concatenate(cols, axis=1) if cols else np.zeros((nb, 0))
        if self.epsilon is not None:
            f = obj[:, 0].copy()
            g = np.concatenate([g, (obj[:, 1] - self.epsilon)[:, None]], axis=1)
        else:
            f = obj @ np.array([w for _, w in self.objectives])
        finite = np.isfinite(f) & np.all(np.isfinite(g), axis=1)
        status = np.where((status == Status.OK) & ~finite, Status.NON_FINITE, status)
        status = status.astype(np.int8)
        ok = status == Status.OK
        obj[~ok] = np.nan
        feasible = ok & (np.all(g <= 0.0, axis=1) if g.shape[1] else True)
        f = self.rank_value(f, g, ok, feasible)
        f, g = Problem.penalise(f, g, ok)
        return Outcome(f, obj, g, status, feasible)

    def rank_value(self, f, g, ok, feasible) -> np.ndarray:
        """Feasibility first (Deb's rules: K. Deb 2000, Comput. Methods Appl. Mech. Eng.
        186, 311–338): a feasible family keeps its objective; a valid but infeasible one gets
        the generation's worst feasible objective plus 1 + |worst| plus its summed scaled
        violations, so it ranks after every feasible one and by how far it misses.  (A family
        couples its stations through scores of in-between constraints; measured on the tidal
        example, CMA-ES's augmented Lagrangian let the joint search drift out of the feasible
        region for good, where this ranking keeps it at the boundary.)"""
        f = f.copy()
        late = ok & ~feasible
        if late.any():
            viol = np.maximum(g[late] / self.constraint_scales, 0.0).sum(axis=1)
            base = 0.0
            if feasible.any():
                worst = float(np.max(f[feasible]))
                base = worst + 1.0 + abs(worst)
            f[late] = base + viol
        return f

    def station_figures(self, y: np.ndarray) -> list[dict]:
        """Each station's own weighted objective and feasibility at one search vector."""
        secs = self.param.station_sections(np.atleast_2d(y)[:1])
        rows = []
        for st, pr, sec in zip(self.stations, self.station_problems, secs):
            o = pr.evaluate_sections(sec)
            rows.append({"station": st.name, "position": st.position, "f": float(o.f[0]),
                         "feasible": bool(o.feasible[0]), "status": int(o.status[0]),
                         **{n: float(v) for n, v in zip(pr.objective_names, o.objectives[0])}})
        return rows


def station_problem(study: Study, run: RunSpec, station: Station | None = None) -> Problem:
    """The :class:`Problem` of a station (its own constraints) or of a plain run."""
    problem = Problem.from_run(study, run)
    cons = run.constraints if station is None else station.constraints
    if cons is not None:
        problem = replace(problem, constraints=dict(cons))
    return problem


def build_problem(study: Study, run: RunSpec, start: np.ndarray | None = None):
    """The problem of any run: a family's joint search (:class:`FamilyProblem`, starting from
    ``start`` (S, D), else the shape's start), a station run (its own constraints), or a run
    of a single-section study."""
    if not run.family:
        return station_problem(study, run)
    fam = study.family
    base = Parametrisation.from_shape(run.shape)
    S = len(study.stations)
    step = 1.0
    if start is None:
        start = np.tile(base.x0(), (S, 1))
    elif fam["start"] == "stations":
        step = fam["step"]
    plain = replace(run, epsilon=None, epsilon_index=None, family=False)
    stations = tuple(study.stations)
    sprobs = tuple(station_problem(study, replace(plain, point=st.point), st)
                   for st in stations)
    checks = fam["checks"]
    cprobs = []
    only_peak = (("peak_suction", 1.0),)  # in-between positions: validity and constraints
    for i in range(S - 1):
        a, b = stations[i], stations[i + 1]
        for k in range(1, checks + 1):
            u = k / (checks + 1)
            pt = interpolate_point(a.point, b.point, u, f"{a.name}-{b.name}@{k}")
            cons = interpolate_constraints(a.constraints, b.constraints, u)
            cprobs.append(replace(sprobs[i], point=pt, constraints=cons, objectives=only_peak))
    return FamilyProblem(FamilyParam(base, S, np.asarray(start, dtype=float), step), stations,
                         sprobs, tuple(cprobs), checks, fam["rule"], fam["fair_tolerance"],
                         tuple(study.objectives.items()), run.epsilon, study.reference_point)


def family_of(study: Study, problem: FamilyProblem, x: np.ndarray, provenance=None) -> Family:
    """The :class:`Family` of one search vector of a family run."""
    sec = problem.param.sections(np.atleast_2d(x)[:1])
    return Family(tuple(s.name for s in study.stations), problem.positions,
                  np.asarray(sec.coefficients), np.degrees(np.asarray(sec.te_angle)),
                  problem.rule, tuple({"cl": s.point.cl} for s in study.stations), provenance)
