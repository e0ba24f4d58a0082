"""Single-objective search: CMA-ES with its augmented-Lagrangian constraint handling and IPOP
restarts, one generation at a time, with a private random generator and exact resume.

The target Cl is met exactly by the closed-form angle inside the evaluation; the search only
sees objectives and constraints.  Each restart r draws from its own generator
``RandomState(SeedSequence([seed, r]))`` passed to CMA-ES as its ``randn`` (CMA-ES's own ``seed``
option would reseed numpy's global generator), so nothing else in the process can perturb a run
and a pickled state continues bit-identically.
"""

from __future__ import annotations

import functools
import math
import time
import warnings
from dataclasses import dataclass, field

import numpy as np

from foilmap.design.fronts import merge_archive
from foilmap.design.problem import Outcome, Problem, front_vectors
from foilmap.design.results import Generation

__all__ = ["SearchState", "new_search", "step", "is_finished", "private_randn"]


def private_randn(seed: int, restart: int):
    """A picklable N(0, 1) sampler of shape (λ, N), private to one run and restart."""
    state = np.random.SeedSequence([int(seed), int(restart)]).generate_state(8)
    return np.random.RandomState(state).randn


def _tear_up_constraints(es) -> None:
    """Set up cma's constraint handling on a new strategy before its first ``tell`` (what cma
    does itself on that first call, less the analysis-only archives of constrained solutions
    and the augmented Lagrangian's logs: neither takes part in the search, together they cost
    about a millisecond a generation, and the logs are files in the working directory)."""
    from cma import optimization_tools

    from foilmap.design._cma_quiet import QuietAugmentedLagrangian

    es.augmented_lagrangian = QuietAugmentedLagrangian(es.N)
    es.best_feasible = optimization_tools.BestFeasibleSolution()
    es._last_feasible_f = None
    es._first_feasible_f = None


def _new_es(problem: Problem, search: dict, seed: int, restart: int, popsize: int,
            remaining: int):
    import cma

    p = problem.param
    lo, hi = p.bounds()
    opts = {
        "randn": private_randn(seed, restart),
        "seed": np.nan,
        "bounds": [lo, hi],
        "BoundaryHandler": cma.BoundTransform,
        "CMA_stds": list(p.sigma_scales()),
        "maxfevals": int(remaining),
        "verbose": -9,
        "verb_log": 0,
        "verb_disp": 0,
        "tolfun": 1e-9,
        "tolx": 1e-9,
    }
    if popsize:
        opts["popsize"] = int(popsize)
    es = cma.CMAEvolutionStrategy(list(p.x0()), 1.0, opts)
    if problem.constraint_names and not getattr(problem, "ranks_constraints", False):
        _tear_up_constraints(es)
    return es


@dataclass
class SearchState:
    """Everything a run needs to continue: pickled whole into the resume checkpoint."""

    seed: int
    max_evaluations: int
    max_restarts: int
    base_popsize: int
    es: object
    restart: int = 0
    generation: int = 0
    evaluations: int = 0
    best_f: float = math.nan
    best_index: int = -1
    best_x: np.ndarray | None = None
    started: float = field(default_factory=time.time)
    elapsed: float = 0.0  # seconds of search before the latest (re)start of the process
    method: str = "cmaes"
    archive_index: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    archive_points: np.ndarray | None = None  # (M, K) raw objectives of the archive


def new_search(problem: Problem, search: dict, seed: int) -> SearchState:
    if search["method"] == "comocma":
        moes = _new_moes(problem, search, seed)
        pop = sum(int(k.popsize) for k in moes.kernels)
        return SearchState(seed=seed, max_evaluations=search["max_evaluations"], max_restarts=0,
                           base_popsize=pop, es=moes, method="comocma",
                           archive_points=np.zeros((0, len(problem.objectives))))
    es = _new_es(problem, search, seed, 0, search["popsize"], search["max_evaluations"])
    return SearchState(seed=seed, max_evaluations=search["max_evaluations"],
                       max_restarts=search["restarts"], base_popsize=int(es.popsize), es=es,
                       archive_points=np.zeros((0, len(problem.objectives))))


def _new_moes(problem: Problem, search: dict, seed: int):
    """COMO-CMA-ES: ``kernels`` CMA-ES instances sharing one private generator, updated in a
    fixed order (sort_increasing) so that a run is reproducible and resumable exactly."""
    import cma
    import comocma
    from moarchiving import BiobjectiveNondominatedSortedList

    p = problem.param
    lo, hi = p.bounds()
    opts = {
        "randn": private_randn(seed, 0),
        "seed": np.nan,
        "bounds": [lo, hi],
        "BoundaryHandler": cma.BoundTransform,
        "CMA_stds": list(p.sigma_scales()),
        "verbose": -9,
        "verb_log": 0,
        "verb_disp": 0,
        "tolx": 1e-9,
    }
    if search["popsize"]:
        opts["popsize"] = int(search["popsize"])
    kernels = comocma.get_cmas(search["kernels"] * [list(p.x0())], 1.0, opts)
    moes = comocma.Sofomore(kernels, reference_point=list(problem.reference_point),
                            opts={"update_order": comocma.sort_increasing, "verb_log": 0,
                                  "verb_disp": 0, "archive": False})
    # the kernels' hypervolume improvements in floating point, on this instance only: the
    # archive's default exact fractions cost a seventh of the search's own time and change
    # nothing a ranking sees (the run's logged hypervolume is computed apart, by moocore)
    moes.NDA = functools.partial(BiobjectiveNondominatedSortedList,
                                 hypervolume_final_float_type=float,
                                 hypervolume_computation_float_type=float)
    return moes


def _mean(es) -> np.ndarray:
    """The distribution mean in search coordinates (through the boundary transform)."""
    m = np.array(es.mean, dtype=float)
    bh = getattr(es, "boundary_handler", None)
    return np.array(bh.transform(m), dtype=float) if bh is not None else m


def is_finished(state: SearchState) -> bool:
    if state.evaluations >= state.max_evaluations:
        return True
    if state.method == "comocma":
        return bool(state.es.stop())
    return bool(state.es.stop()) and state.restart >= state.max_restarts


def _update_archive(state: SearchState, problem: Problem, out: Outcome, first: int) -> float:
    """Add the feasible candidates to the non-dominated archive; return its hypervolume
    against the study's reference point (counting the points that dominate it; NaN without)."""
    from foilmap.design.fronts import hypervolume

    feas = np.flatnonzero(out.feasible)
    if feas.size:
        state.archive_index, state.archive_points = merge_archive(
            state.archive_index, state.archive_points, first + feas, out.objectives[feas])
    if problem.reference_point is None:
        return math.nan
    ref = np.asarray(problem.reference_point)
    inside = np.all(state.archive_points < ref, axis=1)
    return hypervolume(state.archive_points[inside], ref)


def _mo_step(state: SearchState, problem: Problem) -> tuple[Generation, Outcome]:
    moes = state.es
    x = np.array(moes.ask("all"))
    out = problem.evaluate(x)
    vec = front_vectors(problem, out)
    moes.tell(list(x), [list(v) for v in vec])  # in the order asked: tell depends on it
    first = state.evaluations
    state.evaluations += x.shape[0]
    state.generation += 1
    hv = _update_archive(state, problem, out, first)
    sig = float(np.mean([k.sigma for k in moes.kernels]))
    mean = np.mean([_mean(k) for k in moes.kernels], axis=0)
    gen = Generation(
        x=x, f=out.f, objectives=out.objectives, constraints=out.constraints, status=out.status,
        generation=state.generation, evaluations=state.evaluations, restart=0,
        popsize=x.shape[0], sigma=sig, mean=mean, best_f=math.nan, best_index=-1,
        feasible_fraction=float(np.mean(out.feasible)),
        time=state.elapsed + (time.time() - state.started),
        front_index=state.archive_index.copy(), hypervolume=hv)
    return gen, out


def step(state: SearchState, problem: Problem, search: dict) -> tuple[Generation, Outcome]:
    """One generation: restart if the current CMA-ES has stopped, ask, evaluate, tell."""
    if state.method == "comocma":
        return _mo_step(state, problem)
    es = state.es
    if es.stop() and state.restart < state.max_restarts:
        state.restart += 1
        popsize = state.base_popsize * 2**state.restart  # IPOP: double the population
        es = state.es = _new_es(problem, search, state.seed, state.restart, popsize,
                                state.max_evaluations - state.evaluations)
    x = np.array(es.ask())
    out = problem.evaluate(x)
    with warnings.catch_warnings():
        # cma mentions an optional archive package for convergence tracking; not needed here
        warnings.filterwarnings("ignore", message=r".*moarchiving", category=UserWarning)
        if out.constraints.shape[1] and not getattr(problem, "ranks_constraints", False):
            scaled = out.constraints / problem.constraint_scales
            es.tell(list(x), list(out.f), constraints_values=[list(r) for r in scaled])
        else:
            es.tell(list(x), list(out.f))
    first = state.evaluations
    state.evaluations += x.shape[0]
    state.generation += 1
    if np.any(out.feasible):
        fe = np.where(out.feasible, out.f, np.inf)
        i = int(np.argmin(fe))
        if not fe[i] >= state.best_f:  # NaN best (none yet) or an improvement
            state.best_f = float(fe[i])
            state.best_index = first + i
            state.best_x = x[i].copy()
    hv = _update_archive(state, problem, out, first)
    gen = Generation(
        x=x, f=out.f, objectives=out.objectives, constraints=out.constraints, status=out.status,
        generation=state.generation, evaluations=state.evaluations, restart=state.restart,
        popsize=x.shape[0], sigma=float(es.sigma), mean=_mean(es),
        best_f=state.best_f, best_index=state.best_index,
        feasible_fraction=float(np.mean(out.feasible)),
        time=state.elapsed + (time.time() - state.started),
        front_index=state.archive_index.copy(), hypervolume=hv,
    )
    return gen, out
