"""One run: a search writing its own log and checkpoint, with retries; what a worker runs.

Engines (:mod:`foilmap.run.local`, :mod:`foilmap.run.cluster`) hand :func:`worker` the validated
study and a run id; the run commits its log rows, then its checkpoint, at most every
:data:`COMMIT_INTERVAL` seconds, so a killed run resumes bit-identically from its last commit.
"""

from __future__ import annotations

import os
import signal
import time
from pathlib import Path

from foilmap._version import __version__
from foilmap.design.problem import Problem
from foilmap.design.results import RunState
from foilmap.design.study import RunSpec, Study
from foilmap.report.text import CAUTION
from foilmap.store.folder import StudyFolder
from foilmap.store.runlog import (
    RunLogWriter,
    load_checkpoint,
    read_run,
    save_checkpoint,
)

__all__ = ["execute_run", "worker", "init_worker", "COMMIT_INTERVAL", "RUN_ATTEMPTS"]

_QUEUE = None  # progress queue of a worker process
#: seconds between commits of a run (log rows flushed, then the checkpoint renamed into place):
#: a killed run loses at most this much search, and per-generation costs (HDF5 writes, the
#: checkpoint pickle) are paid at most once a second when generations are fast
COMMIT_INTERVAL = 1.0


def execute_run(study: Study, run: RunSpec, out: Path, report=None, should_stop=None) -> dict:
    """Run (or resume, or skip if complete) one run of a study; returns a summary.

    ``report``, if given, is called with a progress dict after every generation.
    ``should_stop``, if given, is asked after every generation: when it answers True the run
    commits what it has (log rows, then the checkpoint), closes its log and raises
    ``SystemExit(143)``; ``foilmap resume`` continues it bit-identically.
    """
    from foilmap.design.search import is_finished, new_search, step

    folder = StudyFolder(out)
    log_path, ckpt_path = folder.log_path(run.run_id), folder.checkpoint_path(run.run_id)
    log_path.parent.mkdir(parents=True, exist_ok=True)
    problem = Problem.from_run(study, run)
    if folder.is_complete(run.run_id):  # (an unreadable log, killed before its first flush,
        return folder.summary(run.run_id)  # starts again)
    if log_path.exists() and ckpt_path.exists():
        state = load_checkpoint(ckpt_path)
        writer = RunLogWriter.reopen(log_path, state.generation)
        state.elapsed = float(read_run(log_path).gen["time"][-1]) if state.generation else 0.0
        state.started = time.time()
    else:
        for p in (log_path, ckpt_path):
            if p.exists():
                p.unlink()
        state = new_search(problem, run.search, run.seed)
        attrs = {
            "software": f"foilmap {__version__}",
            "study_name": study.name,
            "run_id": run.run_id,
            "seed": run.seed,
            "started": time.strftime("%Y-%m-%dT%H:%M:%S%z"),
            "point": {"name": run.point.name, "cl": run.point.cl,
                      "cl_range": run.point.cl_range, "reynolds": run.point.reynolds},
            "variant": run.variant,
            "shape": run.shape,
            "search": run.search,
            "objectives": dict(study.objectives),
            "constraints": study.constraints,
            "variable_names": _variable_names(problem),
            "caution": CAUTION,
        }
        writer = RunLogWriter.create(
            log_path, attrs=attrs, study_text=study.text, dimension=problem.param.dimension,
            objective_names=problem.objective_names, constraint_names=problem.constraint_names,
            chunk_rows=state.base_popsize)
        save_checkpoint(ckpt_path, state)
    with writer:
        pending = []
        last = time.monotonic()
        while not is_finished(state):
            gen, _ = step(state, problem, run.search)
            pending.append(gen)
            if should_stop is not None and should_stop():
                writer.append(pending)
                save_checkpoint(ckpt_path, state)
                raise SystemExit(143)
            if time.monotonic() - last >= COMMIT_INTERVAL or is_finished(state):
                writer.append(pending)  # write and flush the generations first ...
                save_checkpoint(ckpt_path, state)  # ... then the checkpoint, atomically
                pending = []
                last = time.monotonic()
                if report is not None:
                    report({"run": run.run_id, "generation": gen.generation,
                            "evaluations": gen.evaluations, "best": gen.best_f,
                            "feasible": gen.feasible_fraction, "sigma": gen.sigma})
        writer.finish(RunState.COMPLETE)
    ckpt_path.unlink(missing_ok=True)
    return folder.summary(run.run_id)


def _variable_names(problem: Problem) -> list[str]:
    names = []
    for n in range(1, problem.param.n + 1):
        names += [f"re_A{n}"] if problem.param.symmetric else [f"re_A{n}", f"im_A{n}"]
    if problem.param.tau_free:
        names.append("te_angle_unit")
    return names


#: set by SIGTERM in a worker process while it runs a run: the run stops at the end of its
#: generation, after committing (raising from the signal handler itself could land inside an
#: HDF5 call and leave the log half-flushed)
_STOP = {"requested": False, "in_run": False}


def _on_sigterm(*_) -> None:
    if not _STOP["in_run"]:
        os._exit(143)  # idle: nothing to commit
    _STOP["requested"] = True


def init_worker(queue) -> None:
    global _QUEUE
    _QUEUE = queue
    signal.signal(signal.SIGTERM, _on_sigterm)
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # the driver decides; it terminates us


#: attempts of a run inside one task before it is recorded as failed (each resumes from the
#: run's own checkpoint)
RUN_ATTEMPTS = 3


def worker(study: Study, run_id: str, out: str) -> dict:
    """Run one run where the task lands (a pool process or a Dask worker); returns a summary.

    The worker gets the validated study object (its budget applied, start files already read
    and fitted), never its text to parse again.  A run that raises is retried (from its
    checkpoint) up to :data:`RUN_ATTEMPTS` times, then recorded as failed with its error; the
    study goes on with the rest.
    """
    run = next(r for r in study.runs() if r.run_id == run_id)
    q = _QUEUE
    report = (lambda m: q.put(m)) if q is not None else None
    stop = (lambda: _STOP["requested"]) if q is not None else None
    error = None
    _STOP["in_run"] = True
    try:
        for _ in range(RUN_ATTEMPTS):
            if _STOP["requested"]:
                break
            try:
                return execute_run(study, run, Path(out), report, stop)
            except SystemExit as exc:
                # SIGTERM in a pool process: the run has committed and closed its log; leave at
                # once rather than wait for tasks from a driver that may be gone
                if _QUEUE is not None:
                    os._exit(exc.code if isinstance(exc.code, int) else 143)
                raise
            except Exception as exc:  # a failing run is recorded, the study goes on
                error = f"{type(exc).__name__}: {exc}"
    finally:
        _STOP["in_run"] = False
    if _STOP["requested"] and _QUEUE is not None:
        os._exit(143)
    return {"run": run_id, "state": RunState.FAILED.value, "error": error, "attempts": RUN_ATTEMPTS}


