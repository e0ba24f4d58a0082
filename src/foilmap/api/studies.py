"""Result objects of studies, for notebooks and scripts: a run's result with the familiar fields,
a run's history with named columns, a study's merged front, and the study folder they come from.

>>> res = open_results("results/hydrofoil-front-wing")      # doctest: +SKIP
>>> best = res.best()                                       # doctest: +SKIP
>>> foilmap.evaluate(best.section, cl=best.design_cl)       # doctest: +SKIP
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from foilmap.design.results import FrontDesign, History, RunResult, RunState
from foilmap.design.study import RunSpec, Study
from foilmap.errors import InputError
from foilmap.store.folder import StudyFolder, is_multi_objective

__all__ = ["RunState", "RunResult", "History", "FrontDesign", "StudyResults", "open_results",
           "run_study", "RunsFailed"]


class RunsFailed(RuntimeError):
    """Runs of a study failed (or were cut short): the message names them and the first error;
    ``.failed`` holds their summaries and ``.results`` the folder's results as they stand
    (the complete runs are kept; ``run_study`` again retries the rest)."""

    def __init__(self, message: str, failed: list[dict], results: "StudyResults"):
        super().__init__(message)
        self.failed = failed
        self.results = results

#: history columns, in the order of the run log's per-generation datasets
_HISTORY = ("evaluations", "restart", "popsize", "sigma", "best_f", "feasible_fraction",
            "hypervolume", "time")


class StudyResults:
    """A study folder read as results: its runs, the best design, the front, run histories.

    It reads the logs and index the runs write, through :class:`StudyFolder`; it can be opened
    while the study runs.
    """

    def __init__(self, folder: str | Path):
        self._folder = StudyFolder(folder)
        self.folder = self._folder.path
        if not self._folder.exists():
            raise InputError(f"{str(self.folder)!r} is not a study folder (no study.toml)")
        self.study: Study = self._folder.study

    def __repr__(self) -> str:
        return f"StudyResults({str(self.folder)!r}, study={self.study.name!r})"

    def _result(self, run: RunSpec, entry: dict) -> RunResult:
        indexed = entry.get("state", RunState.PENDING.value)
        state = RunState.parse(indexed, RunState.PENDING)
        best, gens, evals, elapsed, message = None, 0, 0, None, entry.get("error", "")
        log = self._folder.log(run.run_id)
        if log is None and self._folder.log_path(run.run_id).exists():
            state, message = RunState.UNREADABLE, "the run log cannot be read"
        elif log is not None:
            b = log.best()
            best = None if b is None else self._folder.design(run.run_id, b["index"], log)
            gens, evals = log.generations, log.evaluations
            elapsed = float(log.gen["time"][-1]) if gens else None
            state = self._folder.merged_state(indexed, log.state.value)
        if not message:
            message = {RunState.COMPLETE: "complete" + ("" if best is not None or
                                                        run.search["method"] != "cmaes"
                                                        else ", no feasible design"),
                       RunState.INTERRUPTED: "interrupted; foilmap resume continues it",
                       RunState.UNFINISHED: "unfinished; foilmap resume continues it"
                       }.get(state, state.value)
        return RunResult(run.run_id, state, run.seed, run.point.name, run.variant,
                         None if best is None else best.x,
                         None if best is None else best.section,
                         None if best is None else best.fun,
                         None if best is None else best.objectives,
                         None if best is None else best.constraints,
                         evals, gens, elapsed, run.point.cl, message)

    @property
    def runs(self) -> list[RunResult]:
        """Every run of the study, in the study's order."""
        index = self._folder.read_index()
        return [self._result(r, index.get(r.run_id, {})) for r in self.study.runs()]

    def run(self, run_id: str) -> RunResult:
        """One run's result by id."""
        try:
            r = self.study.run(run_id)
        except KeyError:
            raise KeyError(f"no run {run_id!r}; runs: "
                           f"{', '.join(r.run_id for r in self.study.runs())}") from None
        return self._result(r, self._folder.read_index().get(run_id, {}))

    def best(self) -> RunResult:
        """The run whose best feasible design has the lowest objective (single-objective
        studies; a front study has :meth:`front` instead)."""
        if is_multi_objective(self.study):
            raise InputError(f"study {self.study.name!r} searches Pareto fronts, so it has no "
                             "single best design: use .front() and choose a design from it")
        # the folder's own rule (a family study's best is its family run's, not a station's)
        return self.run(self._folder.best_design().run_id)

    def front(self) -> list[FrontDesign]:
        """The study's merged Pareto front of feasible designs, sorted by the first objective
        (any study: for a single-objective one it is the front of its logged objectives)."""
        ids, names, pts = self._folder.merged_front()
        out = []
        for design_id, p in zip(ids, pts):
            d = self._folder.design_by_id(design_id)
            out.append(FrontDesign(design_id, d.run_id, dict(zip(names, map(float, p))),
                                   d.section, d.design_cl))
        return out

    def history(self, run_id: str) -> History:
        """One run's history per generation: generation, evaluations, restart, popsize, sigma,
        best_f (best feasible weighted objective so far, NaN before one), feasible_fraction
        (this generation's), hypervolume, time (seconds of search)."""
        self.run(run_id)  # a clear error for an unknown id
        log = self._folder.log(run_id)
        if log is None:
            return History({"generation": np.zeros(0, dtype=int)})
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

    ``workers=1`` (or ``workers = 1`` in the study's ``[engine]`` table) runs the runs one after
    another in this process, with no pool.  Otherwise workers are spawned processes that never
    import the calling script again: a script needs no ``if __name__ == "__main__":`` guard.

    Raises :class:`RunsFailed` when any run failed or was cut short, naming the runs and the
    first error (the complete runs are kept, and calling again retries the others).
    """
    from foilmap.report.progress import Progress
    from foilmap.run import local as _engine

    summaries = _engine.drive_study(
        study, Path(folder), workers=workers, budget=budget,
        progress=Progress.for_study(study, budget) if progress else None, engine=engine,
        scheduler=scheduler)
    results = StudyResults(folder)
    failed = [s for s in summaries if s.get("state") != RunState.COMPLETE.value]
    if failed:
        names = ", ".join(str(s.get("run")) for s in failed)
        first = next((s.get("error") for s in failed if s.get("error")), "no error recorded")
        first = " ".join(str(first).split())  # one line
        raise RunsFailed(f"{len(failed)} of {len(summaries)} runs of study {study.name!r} "
                         f"failed ({names}); first error: {first}; the complete runs are kept "
                         f"in {str(folder)!r}, and run_study again retries the others",
                         failed, results)
    return results
