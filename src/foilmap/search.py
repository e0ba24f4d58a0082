"""Single-objective search: CMA-ES with its augmented-Lagrangian constraint handling and IPOP
restarts, one generation at a time, with a private random generator and exact resume.

The target Cl is met exactly by the closed-form angle inside the evaluation; the search only
sees objectives and constraints.  Each restart r draws from its own generator
``RandomState(SeedSequence([seed, r]))`` passed to CMA-ES as its ``randn`` (CMA-ES's own ``seed``
option would reseed numpy's global generator), so nothing else in the process can perturb a run
and a pickled state continues bit-identically.
"""

from __future__ import annotations

import math
import time
import warnings
from dataclasses import dataclass, field

import numpy as np

from .objectives import Outcome, Problem
from .runlog import Generation

__all__ = ["SearchState", "new_search", "step", "is_finished", "private_randn"]


def private_randn(seed: int, restart: int):
    """A picklable N(0, 1) sampler of shape (λ, N), private to one run and restart."""
    state = np.random.SeedSequence([int(seed), int(restart)]).generate_state(8)
    return np.random.RandomState(state).randn


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
    return cma.CMAEvolutionStrategy(list(p.x0()), 1.0, opts)


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


def new_search(problem: Problem, search: dict, seed: int) -> SearchState:
    es = _new_es(problem, search, seed, 0, search["popsize"], search["max_evaluations"])
    return SearchState(seed=seed, max_evaluations=search["max_evaluations"],
                       max_restarts=search["restarts"], base_popsize=int(es.popsize), es=es)


def _mean(es) -> np.ndarray:
    """The distribution mean in search coordinates (through the boundary transform)."""
    m = np.array(es.mean, dtype=float)
    bh = getattr(es, "boundary_handler", None)
    return np.array(bh.transform(m), dtype=float) if bh is not None else m


def is_finished(state: SearchState) -> bool:
    if state.evaluations >= state.max_evaluations:
        return True
    return bool(state.es.stop()) and state.restart >= state.max_restarts


def step(state: SearchState, problem: Problem, search: dict) -> tuple[Generation, Outcome]:
    """One generation: restart if the current CMA-ES has stopped, ask, evaluate, tell."""
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
        if out.constraints.shape[1]:
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
    gen = Generation(
        x=x, f=out.f, objectives=out.objectives, constraints=out.constraints, status=out.status,
        generation=state.generation, evaluations=state.evaluations, restart=state.restart,
        popsize=x.shape[0], sigma=float(es.sigma), mean=_mean(es),
        best_f=state.best_f, best_index=state.best_index,
        feasible_fraction=float(np.mean(out.feasible)),
        time=state.elapsed + (time.time() - state.started),
    )
    return gen, out
