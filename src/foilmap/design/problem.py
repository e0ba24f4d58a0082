"""A study's problem: objectives and constraints of a batch of search vectors.

Constraints are in the form g ≤ 0 (feasible), one column each.  Candidates whose shape the map
cannot represent, or that cannot reach a lift coefficient of the point, get their status code
and a penalty instead of figures (:meth:`Problem.penalise`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import cached_property

import numpy as np

from foilmap.design.study import Parametrisation, Point, RunSpec, Study
from foilmap.section.evaluation import PROXIES, Evaluation, search_figures
from foilmap.section.operating import cavitation_margin, compressible_cp, critical_mach
from foilmap.section.status import Status

__all__ = ["Problem", "Outcome", "INVALID_CONSTRAINT", "front_vectors"]

#: constraint value given to every constraint of a candidate with an invalid shape
INVALID_CONSTRAINT = 1.0


@dataclass(frozen=True)
class Outcome:
    """Figures of one generation, shapes (B,) or (B, K)/(B, C)."""

    f: np.ndarray  # weighted objective (penalised where invalid)
    objectives: np.ndarray  # (B, K) raw objective values (NaN where invalid)
    constraints: np.ndarray  # (B, C) g ≤ 0 feasible
    status: np.ndarray  # (B,) int8
    feasible: np.ndarray  # (B,) bool: valid and every g ≤ 0
    #: the figures the objectives and constraints came from (a family's fairness reads them)
    evaluation: Evaluation | None = None
    peak: np.ndarray | None = None  # (B,) the largest peak suction over the point's Cls


@dataclass(frozen=True)
class Problem:
    """The objectives and constraints of one run."""

    param: Parametrisation
    point: Point
    objectives: tuple[tuple[str, float], ...]
    constraints: dict
    samples: int  # circle samples per section (the study's ``search.points``)
    proxy_end: float
    epsilon: float | None = None  # ε-constraint run: objective 2 ≤ ε, minimise objective 1
    reference_point: tuple[float, ...] | None = None

    @classmethod
    def from_run(cls, study: Study, run: RunSpec) -> "Problem":
        return cls(Parametrisation.from_shape(run.shape), run.point,
                   tuple(study.objectives.items()), dict(study.constraints),
                   run.search["points"], run.search["proxy_end"], run.epsilon,
                   study.reference_point)

    @property
    def objective_names(self) -> list[str]:
        return [n for n, _ in self.objectives]

    @cached_property
    def _specs(self) -> list[tuple[str, float, object]]:
        """The study's constraints as (name, typical size, g(ev, st, peak) ≤ 0), in log order
        (every bound is bound into its function as a default argument; ``st`` holds the exact
        thickness at the ``station_thickness`` stations, shape (B, M)).

        The search sees each g divided by its typical size (every g of order one for the
        augmented Lagrangian); the logs keep physical values.
        """
        c = self.constraints
        specs = []

        def window(key, name, scale, field, lo_limit, hi_limit, unit=1.0):
            """g for the [low, high] of a key; a bound at the key's own limit bounds nothing."""
            lo, hi = c[key]
            if lo > lo_limit:
                specs.append((f"{name}_low", scale,
                              lambda ev, st, pk, lo=lo * unit: lo - getattr(ev, field)))
            if hi < hi_limit:
                specs.append((f"{name}_high", scale,
                              lambda ev, st, pk, hi=hi * unit: getattr(ev, field) - hi))

        if "thickness" in c:
            window("thickness", "thickness", 0.01, "thickness", 0.0, 1.0)
        if "thickness_x" in c:
            lo, hi = c["thickness_x"]
            specs.append(("thickness_x_low", 0.05, lambda ev, st, pk, lo=lo: lo - ev.thickness_x))
            specs.append(("thickness_x_high", 0.05,
                          lambda ev, st, pk, hi=hi: ev.thickness_x - hi))
        if "min_le_radius" in c:
            specs.append(("min_le_radius", 0.002,
                          lambda ev, st, pk: c["min_le_radius"] - ev.le_radius))
        if "te_angle_deg" in c:
            window("te_angle_deg", "te_angle", math.radians(1.0), "te_angle", 0.0, 60.0,
                   math.radians(1.0))
        if "camber" in c:
            window("camber", "camber", 0.005, "camber", -0.5, 0.5)
        if "camber_x" in c:
            window("camber_x", "camber_x", 0.05, "camber_x", 0.0, 1.0)
        if "cm" in c:
            lo, hi = c["cm"]
            specs.append(("cm_low", 0.01, lambda ev, st, pk, lo=lo: lo - ev.cm_quarter_chord))
            specs.append(("cm_high", 0.01, lambda ev, st, pk, hi=hi: ev.cm_quarter_chord - hi))
        for i, (x, t) in enumerate(c.get("station_thickness", [])):
            specs.append((f"thickness_at_{x:g}", 0.005,
                          lambda ev, st, pk, i=i, t=t: t - st[:, i]))
        if "max_peak_suction" in c:
            specs.append(("max_peak_suction", 0.1, lambda ev, st, pk: pk - c["max_peak_suction"]))
        if "cavitation_margin" in c:
            sigma = self.point.sigma
            specs.append(("cavitation_margin", 0.05,
                          lambda ev, st, pk: c["cavitation_margin"]
                          - cavitation_margin(sigma, pk)))
        if "min_critical_mach" in c:
            specs.append(("min_critical_mach", 0.01,
                          lambda ev, st, pk: c["min_critical_mach"] - self.critical_mach(pk)))
        return specs

    def critical_mach(self, peak: np.ndarray) -> np.ndarray:
        """Critical Mach number at an incompressible peak suction (the point's rule)."""
        return critical_mach(-peak, self.point.compressibility)

    def corrected_peak(self, peak: np.ndarray) -> np.ndarray:
        """The peak suction at the point's Mach number (incompressible when it has none)."""
        if not self.point.mach:
            return peak
        return -compressible_cp(-peak, self.point.mach, self.point.compressibility)

    @property
    def constraint_names(self) -> list[str]:
        names = [n for n, _, _ in self._specs]
        if self.epsilon is not None:
            names.append(f"epsilon_{self.objective_names[1]}")
        return names

    @property
    def constraint_scales(self) -> np.ndarray:
        """Typical size of each constraint (see :attr:`_specs`), in log order."""
        out = [sc for _, sc, _ in self._specs]
        if self.epsilon is not None:
            out.append(max(0.05 * abs(self.epsilon), 1e-3))
        return np.array(out)

    def _proxies(self) -> tuple[str, ...]:
        """The proxies the objectives need, in :data:`~foilmap.section.evaluation.PROXIES`
        order."""
        needs = {"severity": "severity", "laminar_deficit": "thwaites",
                 "stratford_margin": "stratford"}
        wanted = {needs[n] for n in self.objective_names if n in needs}
        return tuple(p for p in PROXIES if p in wanted)

    @property
    def floor(self) -> float:
        """The local-thickness floor t₀ in chords (0: none); a candidate below it gets the
        status ``below_floor``."""
        return float(self.constraints.get("min_local_thickness", 0.0))

    @property
    def stations(self) -> np.ndarray:
        """Chord stations of the ``station_thickness`` constraints, shape (M,)."""
        return np.array([x for x, _ in self.constraints.get("station_thickness", [])],
                        dtype=float)

    def evaluate(self, y: np.ndarray) -> Outcome:
        """Objectives and constraints of the search vectors ``y`` (B, D)."""
        return self.evaluate_sections(self.param.sections(y))

    def evaluate_sections(self, sec) -> Outcome:
        """Objectives and constraints of a batch of sections (a ``SectionSet``)."""
        reference = bool({"profile_drag", "target_cp_rms"} & set(self.objective_names))
        figs = self.search_figures(sec, route="reference" if reference else "compiled")
        ev, peak, st = figs.evaluation, figs.peak, figs.station_thickness
        extra = self._reference_objectives(figs.analysis) if reference else {}
        status = ev.status.copy()
        obj = np.stack([extra[n] if n in extra else self._objective(n, ev, peak)
                        for n, _ in self.objectives], axis=1)
        weights = np.array([w for _, w in self.objectives])
        g = self._constraints(ev, st, peak)
        if self.point.mach:  # the peak-suction bound holds at the point's Mach number
            names = self.constraint_names
            if "max_peak_suction" in names:
                j = names.index("max_peak_suction")
                g[:, j] = self.corrected_peak(peak) - self.constraints["max_peak_suction"]
        if self.epsilon is not None:  # minimise the first objective, bound the second
            f = obj[:, 0].copy()
            g = np.concatenate([g, (obj[:, 1] - self.epsilon)[:, None]], axis=1)
        else:
            f = obj @ weights
        finite = np.isfinite(f) & np.all(np.isfinite(g), axis=1)
        status = np.where((status == Status.OK) & ~finite, Status.NON_FINITE, status)
        status = status.astype(np.int8)
        ok = status == Status.OK
        obj[~ok] = np.nan
        f, g = self.penalise(f, g, ok)
        feasible = ok & (np.all(g <= 0.0, axis=1) if g.shape[1] else True)
        return Outcome(f, obj, g, status, feasible, ev, peak)

    def _objective(self, name: str, ev: Evaluation, peak: np.ndarray) -> np.ndarray:
        """One objective's raw values (B,), computed only when the study asks for it."""
        if name == "peak_suction":
            return self.corrected_peak(peak)
        if name == "laminar_deficit":
            return 1.0 - np.where(np.isnan(ev.thwaites_sep_x_upper), self.proxy_end,
                                  ev.thwaites_sep_x_upper)
        if name == "cm_magnitude":
            return np.abs(ev.cm_quarter_chord)
        if name == "critical_mach_deficit":  # a root per candidate
            return 1.0 - self.critical_mach(peak)
        return getattr(ev, name)  # severity, stratford_margin, area

    def search_figures(self, sec, route: str = "compiled"):
        """The section layer's search-time figures of a batch at this run's point
        (:func:`foilmap.section.evaluation.search_figures`): the design Cl's figures, the
        largest peak suction over the point's Cls (certified; a search needs no more, so the
        design Cl's own peak is asked for only on the reference route, which has it anyway)
        and the exact station thickness."""
        return search_figures(
            sec, self.point.cls, samples=self.samples, proxies=self._proxies(),
            reynolds=self.point.reynolds, proxy_end=self.proxy_end, stations=self.stations,
            floor=self.floor, design_peak=False, route=route)

    def _reference_objectives(self, an) -> dict:
        """Objectives only the numpy reference computes, from its analysis: the boundary-layer
        screening's profile drag and a target's Cp deviation."""
        from foilmap.section.screening import screen_analysis

        extra = {}
        if "profile_drag" in self.objective_names:
            # the screening on the search's own circle grid (exact speeds at its samples)
            extra["profile_drag"] = screen_analysis(an, self.point.reynolds,
                                                    samples=self.samples).cd
        if "target_cp_rms" in self.objective_names:
            extra["target_cp_rms"] = self.target_cp_rms(an)
        return extra

    def target_cp_rms(self, an) -> np.ndarray:
        """RMS of the exact Cp minus the point's target at the target's stations (those
        outside the trailing-edge zone), shape (B,)."""
        from foilmap.section.inverse import target_cp_rms

        return target_cp_rms(an, *self.point.target)

    def _constraints(self, ev, st, peak) -> np.ndarray:
        cols = [fn(ev, st, peak) for _, _, fn in self._specs]
        nb = ev.status.shape[0]
        return np.stack(cols, axis=1) if cols else np.zeros((nb, 0))

    @staticmethod
    def penalise(f: np.ndarray, g: np.ndarray, ok: np.ndarray):
        """Penalty for invalid candidates: worse than every valid one of the generation.

        f = w + 1 + |w| with w the largest valid f of the generation (CMA-ES uses ranks only),
        and every constraint value is :data:`INVALID_CONSTRAINT`; with no valid candidate at all
        f = 1000.  Deterministic: it depends only on the generation.
        """
        f = f.copy()
        g = g.copy()
        if np.any(ok):
            worst = float(np.max(f[ok]))
            f[~ok] = worst + 1.0 + abs(worst)
        else:
            f[:] = 1000.0
        g[~ok] = INVALID_CONSTRAINT
        return f, g


def front_vectors(problem: Problem, out: Outcome) -> np.ndarray:
    """Objective vectors for a multi-objective search, penalised where infeasible, (B, K).

    Feasible: the raw objectives.  Valid but infeasible: each objective plus 10 × the sum of the
    positive scaled constraint violations (a documented penalty; COMO-CMA-ES has no constraint
    handling of its own).  Invalid shape: the reference point plus 1 + |reference| in every
    objective, beyond every point that counts.
    """
    ref = np.asarray(problem.reference_point, dtype=float)
    obj = out.objectives.copy()
    nb = obj.shape[0]
    if out.constraints.shape[1]:
        viol = np.maximum(out.constraints / problem.constraint_scales, 0.0).sum(axis=1)
    else:
        viol = np.zeros(nb)
    ok = out.status == Status.OK
    vec = obj + 10.0 * viol[:, None]
    vec[~ok] = ref + 1.0 + np.abs(ref)
    return vec
