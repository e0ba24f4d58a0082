"""Running studies: one run = one search writing its own log; runs in parallel worker processes.

Layout of a study folder::

    DIR/study.toml        the study text verbatim (what ``foilmap resume DIR`` runs)
    DIR/options.json      command-line overrides that change results (the budget)
    DIR/index.json        the study index: one entry per run (file, seed, point, variant, state)
    DIR/runs/ID.h5        the run logs (docs/run-log.md)
    DIR/runs/ID.resume    the resume checkpoint of an unfinished run (removed when it completes)

Re-running a study skips complete runs and resumes unfinished ones from their checkpoints.
"""

from __future__ import annotations

import json
import multiprocessing as mp
import os
import signal
import threading
import time
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from pathlib import Path

import numpy as np

from . import __version__
from .errors import InputError
from .objectives import Problem
from .runlog import (
    STATE_COMPLETE,
    RunLogWriter,
    load_checkpoint,
    read_run,
    save_checkpoint,
)
from .sectionfile import write_text_atomic
from .study import RunSpec, Study, parse_study

__all__ = ["execute_run", "run_study", "prepare_folder", "load_folder", "run_paths",
           "INDEX_NAME", "STUDY_NAME"]

INDEX_NAME = "index.json"
STUDY_NAME = "study.toml"
OPTIONS_NAME = "options.json"
_QUEUE = None  # progress queue of a worker process
#: seconds between commits of a run (log rows flushed, then the checkpoint renamed into place):
#: a killed run loses at most this much search, and per-generation costs (HDF5 writes, the
#: checkpoint pickle) are paid at most once a second when generations are fast
COMMIT_INTERVAL = 1.0


def run_paths(out: Path, run_id: str) -> tuple[Path, Path]:
    return out / "runs" / f"{run_id}.h5", out / "runs" / f"{run_id}.resume"


def _summary(run: RunSpec, log_path: Path) -> dict:
    log = read_run(log_path)
    best = log.best()
    return {"run": run.run_id, "state": log.state_name, "generations": log.generations,
            "evaluations": log.evaluations, "best": None if best is None else best["f"],
            "best_objectives": None if best is None else dict(
                zip(log.objective_names, map(float, best["objectives"]))),
            "resumes": log.resumes,
            "elapsed_s": float(log.gen["time"][-1]) if log.generations else None,
            "hypervolume": _last_hv(log)}


def _last_hv(log) -> float | None:
    hv = log.gen.get("hypervolume")
    if hv is None or not hv.size or not np.isfinite(hv[-1]):
        return None
    return float(hv[-1])


def execute_run(study: Study, run: RunSpec, out: Path, report=None, should_stop=None) -> dict:
    """Run (or resume, or skip if complete) one run of a study; returns a summary.

    ``report``, if given, is called with a progress dict after every generation.
    ``should_stop``, if given, is asked after every generation: when it answers True the run
    commits what it has (log rows, then the checkpoint), closes its log and raises
    ``SystemExit(143)``; ``foilmap resume`` continues it bit-identically.
    """
    from .search import is_finished, new_search, step

    out = Path(out)
    log_path, ckpt_path = run_paths(out, run.run_id)
    log_path.parent.mkdir(parents=True, exist_ok=True)
    problem = Problem.from_run(study, run)
    if log_path.exists():
        try:
            if read_run(log_path).state == STATE_COMPLETE:
                return _summary(run, log_path)
        except (OSError, KeyError, ValueError):
            pass  # unreadable (killed before its first flush): start again
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
            "caution": ("Ideal-flow screening results: a section that carries loads or people "
                        "must be checked by viscous analysis and physical tests; local codes "
                        "and licensed engineering practice govern."),
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
        writer.finish(STATE_COMPLETE)
    ckpt_path.unlink(missing_ok=True)
    return _summary(run, log_path)


def _variable_names(problem: Problem) -> list[str]:
    names = []
    for n in range(1, problem.param.n + 1):
        names += [f"re_A{n}", f"im_A{n}"]
    if problem.param.tau_free:
        names.append("te_angle_unit")
    return names


# --- the study folder and its index ------------------------------------------------------------


def prepare_folder(study: Study, out: Path, budget: int | None) -> Study:
    """Create or check the study folder; returns the study as it is to be run."""
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    sfile = out / STUDY_NAME
    if sfile.exists():
        if sfile.read_text(encoding="utf-8") != study.text:
            raise InputError(f"folder {str(out)!r} holds a different study ({STUDY_NAME} differs); "
                             "choose another --out or remove the folder")
        old = _read_options(out)
        if budget is not None and old.get("budget") not in (None, budget):
            raise InputError(f"folder {str(out)!r} was started with --budget {old['budget']}; "
                             f"resume it with the same budget or choose another --out")
        budget = old.get("budget", budget)
    else:
        write_text_atomic(sfile, study.text)
    write_text_atomic(out / OPTIONS_NAME, json.dumps({"budget": budget,
                                                      "base_dir": study.base_dir}))
    (out / "runs").mkdir(exist_ok=True)
    return study.with_budget(budget) if budget is not None else study


def _read_options(out: Path) -> dict:
    p = out / OPTIONS_NAME
    return json.loads(p.read_text()) if p.exists() else {}


def load_folder(out: Path) -> Study:
    """The study of an existing folder, with its recorded overrides."""
    out = Path(out)
    sfile = out / STUDY_NAME
    if not sfile.exists():
        raise InputError(f"{str(out)!r} is not a study folder (no {STUDY_NAME})")
    opts = _read_options(out)
    study = parse_study(sfile.read_text(encoding="utf-8"), str(sfile), opts.get("base_dir"))
    budget = opts.get("budget")
    return study.with_budget(budget) if budget is not None else study


def write_index(study: Study, out: Path, states: dict[str, dict]) -> None:
    runs = []
    for r in study.runs():
        entry = {"run": r.run_id, "file": f"runs/{r.run_id}.h5", "seed": r.seed,
                 "point": r.point.name, "variant": r.variant}
        entry.update(states.get(r.run_id, {"state": "pending"}))
        runs.append(entry)
    index = {"schema_version": "1.0", "software": f"foilmap {__version__}",
             "study": study.name, "updated": time.strftime("%Y-%m-%dT%H:%M:%S%z"), "runs": runs}
    write_text_atomic(Path(out) / INDEX_NAME, json.dumps(index, indent=1))


# --- the local process pool --------------------------------------------------------------------


#: set by SIGTERM in a worker process while it runs a run: the run stops at the end of its
#: generation, after committing (raising from the signal handler itself could land inside an
#: HDF5 call and leave the log half-flushed)
_STOP = {"requested": False, "in_run": False}


def _on_sigterm(*_) -> None:
    if not _STOP["in_run"]:
        os._exit(143)  # idle: nothing to commit
    _STOP["requested"] = True


def _init_worker(queue) -> None:
    global _QUEUE
    _QUEUE = queue
    signal.signal(signal.SIGTERM, _on_sigterm)
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # the driver decides; it terminates us


#: what the index keeps of a finished run (so that status need not open complete logs)
_INDEXED = ("state", "generations", "evaluations", "best", "best_objectives", "resumes",
            "elapsed_s", "hypervolume")
#: seconds an interrupted study gives its workers to commit before they are killed
ABORT_GRACE = 20.0
#: attempts of a run inside one task before it is recorded as failed (each resumes from the
#: run's own checkpoint)
RUN_ATTEMPTS = 3


def _worker(study: Study, run_id: str, out: str) -> dict:
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
    return {"run": run_id, "state": "failed", "error": error, "attempts": RUN_ATTEMPTS}


def _todo(study: Study, out: Path, states: dict) -> list[RunSpec]:
    todo = []
    for r in study.runs():
        log_path, _ = run_paths(out, r.run_id)
        try:
            if log_path.exists() and read_run(log_path).state == STATE_COMPLETE:
                s = _summary(r, log_path)
                states[r.run_id] = {k: s[k] for k in _INDEXED if s.get(k) is not None}
                continue
        except (OSError, KeyError, ValueError):
            pass
        todo.append(r)
    return todo


_BLAS_VARS = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")


class _single_threaded_kernels:
    """Kernels single-threaded in the workers started inside this block: parallelism is across
    runs, and the bits do not depend on how many BLAS threads a machine offers.  Spawned workers
    inherit the environment at their start; the caller's environment is restored after."""

    def __enter__(self):
        self._saved = {v: os.environ.get(v) for v in _BLAS_VARS}
        for v in _BLAS_VARS:
            os.environ[v] = "1"

    def __exit__(self, *exc):
        for v, old in self._saved.items():
            if old is None:
                os.environ.pop(v, None)
            else:
                os.environ[v] = old
        return False


def run_study(study: Study, out: Path, workers: int | None = None, budget: int | None = None,
              progress=None, engine: str | None = None, scheduler: str | None = None
              ) -> list[dict]:
    """Run every unfinished run of a study; returns the summaries of the runs run now.

    ``engine`` is ``"local"`` (a process pool of ``workers`` on this machine) or ``"dask"`` (a
    Dask cluster at ``scheduler``, or a LocalCluster of ``workers`` when no address is given).
    The same study and seeds give the same logs on every engine.  What is not given comes
    from the study's ``[engine]`` table.
    """
    engine = engine or study.engine["kind"]
    scheduler = scheduler if scheduler is not None else (study.engine["scheduler"] or None)
    workers = workers or study.engine["workers"] or None
    if scheduler and engine != "dask":
        raise InputError("a scheduler address needs the dask engine (--engine dask, or "
                         "kind = \"dask\" in [engine])")
    out = Path(out)
    # a budget set on the study object is recorded like --budget, so that resume keeps it
    study = prepare_folder(study, out, budget if budget is not None else study.budget)
    runs = study.runs()
    workers = max(1, min(workers or os.cpu_count() or 1, len(runs)))
    states: dict[str, dict] = {}
    todo = _todo(study, out, states)
    write_index(study, out, states)
    if progress is not None:
        progress.total_runs = len(runs)
        progress.done = len(runs) - len(todo)
    if not todo:
        return []
    from . import _compiled

    _compiled.warm_up()  # workers then load the compiled kernel from the cache
    args = (study,)
    if engine not in ("local", "dask"):
        raise InputError(f"engine {engine!r} is not one of: local, dask")
    with _single_threaded_kernels():  # a LocalCluster starts its workers here
        if engine == "dask":
            from .dask_engine import DaskBackend

            backend = DaskBackend(workers, scheduler, out)
        else:
            backend = _LocalBackend(workers)
    return _drive(backend, study, out, todo, args, states, progress)


class _LocalBackend:
    """The default engine: spawned worker processes on this machine."""

    def __init__(self, workers: int):
        ctx = mp.get_context("spawn")
        self.queue = ctx.Queue()
        self.pool = ProcessPoolExecutor(max_workers=workers, mp_context=ctx,
                                        initializer=_init_worker, initargs=(self.queue,))

    def submit(self, args, run_id: str, out: Path):
        with _single_threaded_kernels():  # the pool starts its workers on submission
            return self.pool.submit(_worker, *args, run_id, str(out))

    def wait(self, pending, timeout: float):
        return wait(pending, timeout=timeout, return_when=FIRST_COMPLETED)

    def result(self, fut):
        return fut.result()

    def messages(self):
        while True:
            try:
                yield self.queue.get_nowait()
            except Exception:
                return

    def abort(self) -> None:
        """Stop every worker: SIGTERM makes a worker commit its run at the end of the current
        generation and leave; one that has not left after :data:`ABORT_GRACE` seconds is
        killed (its run then resumes from its last commit)."""
        procs = list((getattr(self.pool, "_processes", None) or {}).values())
        for p in procs:
            p.terminate()
        deadline = time.monotonic() + ABORT_GRACE
        for p in procs:
            p.join(timeout=max(0.0, deadline - time.monotonic()))
        for p in procs:
            if p.is_alive():
                p.kill()
                p.join(timeout=5.0)
        self.pool.shutdown(wait=False, cancel_futures=True)
        self._aborted = True

    def close(self) -> None:
        if not getattr(self, "_aborted", False):
            self.pool.shutdown(wait=True, cancel_futures=True)


def _drive(backend, study: Study, out: Path, todo, args, states, progress) -> list[dict]:
    """Submit every run, collect them as they complete, keep the index and the progress."""
    summaries = []
    try:
        futures = {backend.submit(args, r.run_id, out): r for r in todo}
        for r in todo:
            states[r.run_id] = {"state": "queued"}
        pending = set(futures)
        while pending:
            done, pending = backend.wait(pending, 0.5)
            if _drain(backend.messages(), progress, states):
                write_index(study, out, states)  # live status sees the run as running
            for fut in done:
                r = futures.pop(fut)
                try:
                    s = backend.result(fut)
                except Exception as exc:  # the worker process itself died, too often
                    s = {"run": r.run_id, "state": "failed",
                         "error": f"{type(exc).__name__}: {exc}"}
                summaries.append(s)
                states[r.run_id] = {k: s.get(k) for k in _INDEXED + ("error",)
                                    if s.get(k) is not None}
                if progress is not None:
                    progress.run_ended(r.run_id, s["state"], s.get("best"), s.get("error"), s)
                write_index(study, out, states)
        _drain(backend.messages(), progress, states)
    except BaseException:
        # an interrupt (Ctrl-C, SIGTERM) or an engine failure: a second signal must not break
        # the shutdown, which commits every run and leaves no process behind
        old = {}
        if threading.current_thread() is threading.main_thread():
            old = {sig: signal.signal(sig, signal.SIG_IGN)
                   for sig in (signal.SIGINT, signal.SIGTERM)}
        try:
            for st in states.values():
                if st.get("state") in ("queued", "running"):
                    st["state"] = "interrupted"
            backend.abort()
            write_index(study, out, states)
        finally:
            for sig, handler in old.items():
                signal.signal(sig, handler)
        raise
    finally:
        backend.close()
        if progress is not None:
            progress.close()
    write_index(study, out, states)
    return summaries


def _drain(messages, progress, states) -> bool:
    """Take the workers' progress messages; True when a run has just started running."""
    started = False
    for msg in messages:
        st = states.setdefault(msg["run"], {})
        if st.get("state") not in ("complete", "failed", "running"):  # not a late message
            st["state"] = "running"
            started = True
        if progress is not None:
            progress.update(msg)
    return started
