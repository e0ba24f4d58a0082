"""Result objects of studies, for notebooks and scripts: a run's result with the familiar fields,
a run's history with named columns, a study's merged front, and the study folder they come from.

>>> res = open_results("results/hydrofoil-front-wing")      # doctest: +SKIP
>>> best = res.best()                                       # doctest: +SKIP
>>> foilmap.evaluate(best.section, cl=best.design_cl)       # doctest: +SKIP
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from enum import Enum
from pathlib import Path

import numpy as np

from .conformal import SectionSet
from .engine import INDEX_NAME, load_folder, run_paths
from .errors import InputError
from .runlog import read_run
from .study import Parametrisation, RunSpec, Study

__all__ = ["RunState", "RunResult", "History", "FrontDesign", "StudyResults", "open_results",
           "run_study"]


class RunState(str, Enum):
    """The state of a run, as the study index, ``status`` and the result objects name it."""

    PENDING = "pending"  # not started
    QUEUED = "queued"  # handed to an engine, not yet running
    RUNNING = "running"
    INTERRUPTED = "interrupted"  # stopped by Ctrl-C or SIGTERM; resume continues it
    UNFINISHED = "unfinished"  # a log without a complete mark (killed); resume continues it
    COMPLETE = "complete"
    FAILED = "failed"  # failed every attempt; its error is recorded
    UNREADABLE = "unreadable"  # a log that cannot be read


@dataclass(frozen=True)
class RunResult:
    """The outcome of one run, like an optimiser's result.

    Attributes
    ----------
    id : the run id (point, variant, seed)
    state : :class:`RunState`
    x : best feasible search vector, or None
    section : the best feasible design as a one-section :class:`SectionSet` (straight into
        :func:`foilmap.evaluate`), or None
    fun : its weighted objective (the value the search minimised), or None
    objectives, constraints : its objective values and constraint values (g ≤ 0 feasible) by
        name, or None
    evaluations, generations : how much the run searched
    time : seconds of search, or None
    design_cl : the run's design lift coefficient
    message : a one-line account of the state
    """

    id: str
    state: RunState
    seed: int
    point: str
    variant: str
    x: np.ndarray | None
    section: SectionSet | None
    fun: float | None
    objectives: dict | None
    constraints: dict | None
    evaluations: int
    generations: int
    time: float | None
    design_cl: float
    message: str

    @property
    def success(self) -> bool:
        """True for a complete run with a feasible design."""
        return self.state is RunState.COMPLETE and self.section is not None


@dataclass(frozen=True)
class History:
    """A run's history, one row per generation, with named columns (``history["best_f"]``)."""

    columns: dict = field(repr=False)

    @property
    def names(self) -> list[str]:
        return list(self.columns)

    def __getitem__(self, name: str) -> np.ndarray:
        try:
            return self.columns[name]
        except KeyError:
            raise KeyError(f"no column {name!r}; columns: {', '.join(self.columns)}") from None

    def __len__(self) -> int:
        return len(next(iter(self.columns.values()))) if self.columns else 0

    def to_frame(self):
        """A pandas DataFrame of the columns (pandas must be installed)."""
        try:
            import pandas as pd
        except ImportError:
            raise ImportError("History.to_frame needs pandas (pip install pandas); the columns "
                              "are available as arrays: history[name]") from None
        return pd.DataFrame(self.columns)


@dataclass(frozen=True)
class FrontDesign:
    """One design of a study's merged Pareto front."""

    id: str  # RUN#EVALUATION, as ``foilmap pick --index`` takes it
    run: str
    objectives: dict
    section: SectionSet
    design_cl: float


#: history columns, in the order of the run log's per-generation datasets
_HISTORY = ("evaluations", "restart", "popsize", "sigma", "best_f", "feasible_fraction",
            "hypervolume", "time")


class StudyResults:
    """A study folder read as results: its runs, the best design, the front, run histories.

    It reads the logs and index the runs write; it can be opened while the study runs.
    """

    def __init__(self, folder: str | Path):
        self.folder = Path(folder)
        if not (self.folder / INDEX_NAME).exists() and not (self.folder / "study.toml").exists():
            raise InputError(f"{str(self.folder)!r} is not a study folder (no study.toml)")
        self.study: Study = load_folder(self.folder)

    def __repr__(self) -> str:
        return f"StudyResults({str(self.folder)!r}, study={self.study.name!r})"

    def _index(self) -> dict:
        p = self.folder / INDEX_NAME
        if not p.exists():
            return {}
        return {e["run"]: e for e in json.loads(p.read_text())["runs"]}

    def _result(self, run: RunSpec, entry: dict) -> RunResult:
        path = run_paths(self.folder, run.run_id)[0]
        state = RunState(entry.get("state", "pending")) if entry.get("state") in \
            RunState._value2member_map_ else RunState.PENDING
        best, gens, evals, elapsed, message = None, 0, 0, None, entry.get("error", "")
        names, cnames = [], []
        if path.exists():
            try:
                log = read_run(path)
            except (OSError, KeyError, ValueError) as exc:
                state, message = RunState.UNREADABLE, str(exc)
            else:
                best = log.best()
                gens, evals = log.generations, log.evaluations
                elapsed = float(log.gen["time"][-1]) if gens else None
                names, cnames = log.objective_names, log.constraint_names
                if log.state_name == "complete":
                    state = RunState.COMPLETE
                elif state in (RunState.PENDING, RunState.QUEUED, RunState.COMPLETE):
                    state = RunState.UNFINISHED
        if best is None:
            x = section = fun = objectives = constraints = None
        else:
            x = np.asarray(best["x"], dtype=float)
            section = Parametrisation.from_shape(run.shape).sections(x[None, :])
            fun = float(best["f"])
            objectives = dict(zip(names, map(float, best["objectives"])))
            constraints = dict(zip(cnames, map(float, best["constraints"])))
        if not message:
            message = {RunState.COMPLETE: "complete" + ("" if best is not None or
                                                        run.search["method"] != "cmaes"
                                                        else ", no feasible design"),
                       RunState.INTERRUPTED: "interrupted; foilmap resume continues it",
                       RunState.UNFINISHED: "unfinished; foilmap resume continues it"
                       }.get(state, state.value)
        return RunResult(run.run_id, state, run.seed, run.point.name, run.variant, x, section,
                         fun, objectives, constraints, evals, gens, elapsed, run.point.cl,
                         message)

    @property
    def runs(self) -> list[RunResult]:
        """Every run of the study, in the study's order."""
        index = self._index()
        return [self._result(r, index.get(r.run_id, {})) for r in self.study.runs()]

    def run(self, run_id: str) -> RunResult:
        """One run's result by id."""
        for r in self.study.runs():
            if r.run_id == run_id:
                return self._result(r, self._index().get(run_id, {}))
        raise KeyError(f"no run {run_id!r}; runs: {', '.join(r.run_id for r in self.study.runs())}")

    def best(self) -> RunResult:
        """The run whose best feasible design has the lowest objective (single-objective
        studies; a front study has :meth:`front` instead)."""
        from .studyreport import is_multi_objective

        if is_multi_objective(self.study):
            raise InputError(f"study {self.study.name!r} searches Pareto fronts, so it has no "
                             "single best design: use .front() and choose a design from it")
        found = [r for r in self.runs if r.fun is not None]
        if not found:
            raise InputError(f"no run of study {self.study.name!r} has a feasible design yet")
        return min(found, key=lambda r: r.fun)

    def front(self) -> list[FrontDesign]:
        """The study's merged Pareto front of feasible designs, sorted by the first objective
        (any study: for a single-objective one it is the front of its logged objectives)."""
        from .fronts import merge_archive
        from .frontreport import collect_fronts

        fronts = collect_fronts([str(self.folder)])
        names = fronts[0].objective_names
        allp = np.concatenate([f.objectives for f in fronts])
        ids = sum((f.ids for f in fronts), [])
        xs = [x for f in fronts for x in f.variables]
        specs = {s.run_id: s for f in fronts for s in f.specs}
        if not allp.shape[0]:
            return []
        keep, pts = merge_archive(np.zeros(0, dtype=np.int64), np.zeros((0, len(names))),
                                  np.arange(allp.shape[0]), allp)
        out = []
        for i in keep[np.argsort(pts[:, 0], kind="stable")]:
            run_id = ids[i].split("#")[0]
            spec = specs[run_id]
            sec = Parametrisation.from_shape(spec.shape).sections(np.asarray(xs[i])[None, :])
            out.append(FrontDesign(ids[i], run_id, dict(zip(names, map(float, allp[i]))), sec,
                                   spec.point.cl))
        return out

    def history(self, run_id: str) -> History:
        """One run's history per generation: generation, evaluations, restart, popsize, sigma,
        best_f (best feasible weighted objective so far, NaN before one), feasible_fraction
        (this generation's), hypervolume, time (seconds of search)."""
        self.run(run_id)  # a clear error for an unknown id
        path = run_paths(self.folder, run_id)[0]
        if not path.exists():
            return History({"generation": np.zeros(0, dtype=int)})
        log = read_run(path)
        cols = {"generation": np.arange(1, log.generations + 1)}
        for name in _HISTORY:
            if name in log.gen:
                cols[name] = np.asarray(log.gen[name])
        return History(cols)


def open_results(folder: str | Path) -> StudyResults:
    """The results of a study folder (also while the study runs)."""
    return StudyResults(folder)


def run_study(study: Study, folder: str | Path, *, workers: int | None = None,
              engine: str | None = None, scheduler: str | None = None,
              budget: int | None = None, progress: bool = False) -> StudyResults:
    """Run every unfinished run of a study into ``folder`` and return its results.

    The study's ``[engine]`` table decides where runs go unless ``engine``, ``scheduler`` or
    ``workers`` say otherwise.  ``progress=True`` shows progress on standard error (a bar on a
    terminal, periodic lines otherwise); by default nothing is printed.  Nothing changes in the
    calling process (environment, signal handlers, plotting backend), and nothing is written
    outside ``folder``.  Ctrl-C commits every run; calling again resumes them.
    """
    from . import engine as _engine
    from .progress import Progress

    _engine.run_study(study, Path(folder), workers=workers, budget=budget,
                      progress=Progress.for_study(study, budget) if progress else None,
                      engine=engine, scheduler=scheduler)
    return StudyResults(folder)
