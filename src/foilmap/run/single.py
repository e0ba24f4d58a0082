"""One run: a search writing its own log and checkpoint, with retries; what a worker runs.

Engines (:mod:`foilmap.run.local`, :mod:`foilmap.run.cluster`) hand :func:`worker` the validated
study and a run id; the run commits its log rows, then its checkpoint, after its first
generation and then at most every :data:`COMMIT_INTERVAL` seconds, so a killed run resumes
bit-identically from its last commit.
One process writes a run at a time: :func:`execute_run` holds the run's lock
(``DIR/runs/ID.lock``, :mod:`foilmap.store.lock`) while it writes, and before continuing a run
it checks that the checkpoint and the log agree (:func:`recover`).
"""

from __future__ import annotations

import atexit
import ctypes
import os
import signal
import sys
import threading
import time
import warnings
from pathlib import Path

import numpy as np

from foilmap._version import __version__
from foilmap.caution import CAUTION
from foilmap.design.family import FamilyProblem, build_problem
from foilmap.design.problem import Problem
from foilmap.design.results import RunState
from foilmap.design.study import Parametrisation, RunSpec, Study
from foilmap.store.folder import StudyFolder
from foilmap.store.lock import Busy, Lock
from foilmap.store.runlog import (
    CheckpointError,
    RunLog,
    RunLogWriter,
    check_writable_process,
    generation_digest,
    leave_if_unclosed,
    quiet_refused_writes,
    load_checkpoint,
    read_run,
    save_checkpoint,
)

__all__ = ["execute_run", "recover", "worker", "disk_problem", "init_worker", "COMMIT_INTERVAL",
           "RUN_ATTEMPTS", "RUN_LOCK_WAIT"]

_QUEUE = None  # progress queue of a worker process
#: seconds between commits of a run (log rows flushed, then the checkpoint renamed into place):
#: a killed run loses at most this much search, and per-generation costs (HDF5 writes, the
#: checkpoint pickle) are paid at most once a second when generations are fast
COMMIT_INTERVAL = 1.0
#: seconds a run waits for its lock when another process holds it (an orphaned worker of a
#: killed driver commits and leaves within about a second); then the run is refused
RUN_LOCK_WAIT = 30.0

#: why a log's own figures do not seed a restarted search (said in the note)
_NO_SEED_FROM_LOG = ("the log keeps CMA-ES's mean and step size, not its covariance, evolution "
                     "paths and random state, so its figures could not continue it "
                     "bit-identically")


def station_run_id(run: RunSpec, station: str) -> str:
    """The id of the station run that a family run starts from (same variant, level, seed)."""
    return station + run.run_id[len(run.point.name):]


def _seed_note(run_id: str, why: str, log: RunLog | None) -> str:
    gens = log.generations if log is not None else 0
    if gens:
        return (f"run {run_id}: {why}; restarts from its seed and recomputes its "
                f"{gens} logged generations to the same bits ({_NO_SEED_FROM_LOG})")
    return f"run {run_id}: {why}; restarts from its seed"


def recover(log_path: Path, ckpt_path: Path, run_id: str, log: RunLog | None = None):
    """How a run continues from what its folder holds: ``(state, generation, log, note)``.

    ``state`` is the checkpoint's search state when the checkpoint is sound, signed by the
    user's key and agrees with the log (its generation is in the log, with the same number of
    evaluations and the same checksum of that generation's rows); ``generation`` is where the log
    is cut to continue.  Otherwise ``state`` is None and the run restarts from its seed (the
    last generation on which both agree is then 0: a run has one checkpoint), which gives the
    same bits as before, only later.  ``note`` is one line saying what was found and done (None
    when nothing was amiss: a log a few rows ahead of its checkpoint is the normal state of a
    killed run).  The caller holds the run's lock, so nobody else writes the log: a short file
    is truncated, not being flushed, and is named at once.  ``log``: the log as the caller has
    already read it whole (not read again).
    """
    log_err = None
    if log is None and log_path.exists():
        try:
            log = read_run(log_path, settle=False)  # the caller holds the run's lock
        except Exception as exc:  # noqa: BLE001 - any damage: keep what can be kept below
            log_err = f"{type(exc).__name__}: {str(exc).splitlines()[0] if str(exc) else ''}"
    try:
        state, info = load_checkpoint(ckpt_path, with_info=True)
    except CheckpointError as exc:
        if exc.kind == "missing" and log_err is None and (log is None or not log.generations):
            return None, 0, log, None  # a new run, or one killed before its first commit
        if log_err is not None:
            return None, 0, None, _seed_note(run_id, f"log {log_path.name} is damaged "
                                             f"({log_err}) and {exc}", None)
        return None, 0, log, _seed_note(run_id, str(exc), log)
    g = int(info.get("generation", -1))
    if log_err is not None:
        # keep what is readable: the rows up to the checkpoint's generation, if they are whole
        try:
            log = read_run(log_path, upto=g, settle=False)
        except Exception:  # noqa: BLE001
            return None, 0, None, _seed_note(
                run_id, f"log {log_path.name} is damaged ({log_err})", None)
    if log is None:
        return None, 0, None, (None if g == 0 else _seed_note(
            run_id, f"log {log_path.name} is missing (checkpoint at generation {g})", None))
    why = None
    if info.get("run") != run_id:
        why = f"checkpoint {ckpt_path.name} belongs to run {info.get('run')!r}"
    elif getattr(state, "generation", None) != g:
        why = f"checkpoint {ckpt_path.name} holds another generation than its header"
    elif log.generations < g:
        why = (f"checkpoint at generation {g} but the log holds only {log.generations} "
               "readable generations")
    elif g and (int(log.gen["evaluations"][g - 1]) != int(info.get("evaluations", -1))
                or generation_digest(log.evals, log.gen, log.front_index, g)
                != info.get("digest")):
        why = (f"checkpoint and log disagree at generation {g} (evaluations or the "
               "checksum of its rows)")
    if why is not None:
        return None, 0, log, _seed_note(run_id, why + "; rolled back to generation 0, the "
                                        "last on which both agree", log)
    note = None
    if log_err is not None:
        note = (f"run {run_id}: log {log_path.name} is damaged after generation {g} "
                f"({log_err}); keeps its {g} whole generations and continues from the "
                "checkpoint")
    return state, g, log, note


def execute_run(study: Study, run: RunSpec, out: Path, report=None, should_stop=None,
                lock_wait: float | None = RUN_LOCK_WAIT) -> dict:
    """Run (or resume, or skip if complete) one run of a study; returns a summary.

    ``report``, if given, is called with a progress dict after every commit, and with
    ``{"run", "note"}`` when the run's files needed repair (one line saying what was done).
    ``should_stop``, if given, is asked after every generation: when it answers True the run
    commits what it has (log rows, then the checkpoint), closes its log and raises
    ``SystemExit(143)``; ``foilmap resume`` continues it bit-identically.  The run's lock is
    held throughout; another process holding it makes this wait up to :data:`RUN_LOCK_WAIT`
    seconds, then raise :class:`~foilmap.store.lock.Busy`.
    """
    check_writable_process()  # a full disk spoilt HDF5 in this process: the run fails at once
    folder = StudyFolder(out, study)
    log_path = folder.log_path(run.run_id)
    log_path.parent.mkdir(parents=True, exist_ok=True)
    lock = Lock(log_path.with_suffix(".lock"), f"run {run.run_id}", label=f"run {run.run_id}")
    lock.acquire(wait=lock_wait)
    try:
        return _execute(study, run, folder, report, should_stop)
    finally:
        lock.release()


def _execute(study: Study, run: RunSpec, folder: StudyFolder, report, should_stop) -> dict:
    from foilmap.design.search import is_finished, new_search, step

    log_path, ckpt_path = folder.log_path(run.run_id), folder.checkpoint_path(run.run_id)
    # read once, as the lock's holder (an unreadable log, killed before its first flush, is
    # None here and recover names its damage)
    found = folder.log(run.run_id, settle=False)
    if found is not None and found.state is RunState.COMPLETE:
        ckpt_path.unlink(missing_ok=True)
        return folder.summary(run.run_id, found)
    start = _station_starts(study, run, folder, report, should_stop) if run.family else None
    problem = build_problem(study, run, start)
    state, kept, old, note = recover(log_path, ckpt_path, run.run_id, found)
    notes = [note] if note else []
    if note and report is not None:
        report({"run": run.run_id, "note": note})
    fresh = state is None
    if not fresh:
        writer = RunLogWriter.reopen(log_path, kept, old=old)
        state.elapsed = float(old.gen["time"][kept - 1]) if kept else 0.0
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
            "constraints": study.constraints if run.constraints is None else run.constraints,
            "variable_names": _variable_names(problem),
            "caution": CAUTION,
        }
        writer = RunLogWriter.create(
            log_path, attrs=attrs, study_text=study.text, dimension=problem.param.dimension,
            objective_names=problem.objective_names, constraint_names=problem.constraint_names,
            chunk_rows=state.base_popsize, resumes=(old.resumes + 1) if old is not None else 0)

    with writer:  # closed on every way out: HDF5 left to close a file whose write failed (a
        # full disk) when the writer is collected crashes the process (SIGSEGV in libhdf5)
        if fresh:
            _commit(writer, [], ckpt_path, state, run.run_id)
        pending = []
        # the first generation is committed at once (status shows a resumed run moving, and a
        # run killed in its first second keeps a generation), then at least once a second
        last = -float("inf")
        while not is_finished(state):
            gen, _ = step(state, problem, run.search)
            pending.append(gen)
            if should_stop is not None and should_stop():
                _commit(writer, pending, ckpt_path, state, run.run_id)
                raise SystemExit(143)
            if time.monotonic() - last >= COMMIT_INTERVAL or is_finished(state):
                _commit(writer, pending, ckpt_path, state, run.run_id)
                pending = []
                last = time.monotonic()
                if report is not None:
                    report({"run": run.run_id, "generation": gen.generation,
                            "evaluations": gen.evaluations, "best": gen.best_f,
                            "feasible": gen.feasible_fraction, "sigma": gen.sigma})
        writer.finish(RunState.COMPLETE)
    ckpt_path.unlink(missing_ok=True)
    summary = folder.summary(run.run_id)
    if notes:
        summary["notes"] = notes
    return summary


def _commit(writer: RunLogWriter, pending: list, ckpt_path: Path, state, run_id: str) -> None:
    """Write and flush the generations first, then the signed checkpoint with the checksum of
    the last generation's rows as written, atomically (temporary file, rename)."""
    writer.append(pending)
    save_checkpoint(ckpt_path, state, {"run": run_id, "generation": int(state.generation),
                                       "evaluations": int(state.evaluations),
                                       "digest": writer.digest()})


def _variable_names(problem: Problem) -> list[str]:
    names = []
    for n in range(1, problem.param.n + 1):
        names += [f"re_A{n}"] if problem.param.symmetric else [f"re_A{n}", f"im_A{n}"]
    if problem.param.tau_free:
        names.append("te_angle_unit")
    if isinstance(problem, FamilyProblem):  # a family: each station's block in turn
        return [f"{st.name}:{n}" for st in problem.stations for n in names]
    return names


def _station_starts(study: Study, run: RunSpec, folder: StudyFolder, report,
                    should_stop) -> np.ndarray | None:
    """A family's joint search starts from its station runs' best designs: the station runs
    not complete yet are run here first (one another worker is running is waited for, as its
    lock is).  None when the family starts from the shape.  A station run with no feasible
    design yet gives its best valid one; with none, the shape's start."""
    if study.family["start"] != "stations":
        return None
    base = Parametrisation.from_shape(run.shape)
    start = np.tile(base.x0(), (len(study.stations), 1))
    for i, st in enumerate(study.stations):
        sid = station_run_id(run, st.name)
        srun = folder.run_spec(sid)
        if not folder.is_complete(sid):
            execute_run(study, srun, folder.path, report, should_stop, lock_wait=None)
        log = folder.log(sid)
        best = log.best() if log is not None else None
        if best is not None:
            start[i] = np.asarray(best["x"], dtype=float)
        elif log is not None and log.evaluations:
            ok = np.flatnonzero(log.evals["status"] == 0)
            if ok.size:
                start[i] = log.evals["x"][ok[np.argmin(log.evals["f"][ok])]]
    return start


#: set by SIGTERM in a worker process while it runs a run: the run stops at the end of its
#: generation, after committing (raising from the signal handler itself could land inside an
#: HDF5 call and leave the log half-flushed)
_STOP = {"requested": False, "in_run": False}
#: seconds between a worker's checks that its driver (or its Dask task) is still there
WATCH_INTERVAL = 0.2


def _on_sigterm(*_) -> None:
    if not _STOP["in_run"]:
        os._exit(143)  # idle: nothing to commit
    _STOP["requested"] = True


def _die_with_parent(sig: int = signal.SIGTERM) -> None:
    """Ask Linux to send ``sig`` to this process when its parent dies (prctl PR_SET_PDEATHSIG;
    nothing elsewhere: the watcher thread covers every system)."""
    try:
        libc = ctypes.CDLL(None, use_errno=True)
        libc.prctl(1, int(sig), 0, 0, 0)  # PR_SET_PDEATHSIG = 1
    except (OSError, AttributeError):
        pass


def _watch_driver(driver_pid: int) -> None:
    """Stop this worker when its driver is gone (killed outright: SIGKILL, the out-of-memory
    killer): the parent-death signal does it on Linux; this thread, which sees the worker
    re-parented, does it everywhere and covers a driver that died before the signal was set."""
    while True:
        if os.getppid() != driver_pid:
            _on_sigterm()  # commits at the end of the generation (or leaves at once when idle)
            return
        time.sleep(WATCH_INTERVAL)


#: what ``import cma`` pulls in that a search never uses: the plotting interface (cma.s) and
#: scipy.stats (for a rank correlation in its surrogate models); 1.3 s of a worker's start
_CMA_UNUSED = ("matplotlib", "matplotlib.pyplot", "scipy.stats")


def import_cma_lean() -> None:
    """Import cma without :data:`_CMA_UNUSED`, in a process of our own (a pool worker).

    cma imports both at its top inside ``try``/``except ImportError`` and falls back (no
    plotting; its own Kendall tau), and a search uses neither.  Each is held back only while
    cma imports (an entry of None in ``sys.modules``) and only if nothing has imported it yet,
    so a later import of either in this process works as usual.  If cma's import fails this way
    anyway (another version), cma is imported as usual.  Never called in a caller's process:
    there it would leave the caller's cma without plotting.
    """
    if "cma" in sys.modules:
        return
    held = [m for m in _CMA_UNUSED if m not in sys.modules]
    try:
        for m in held:
            sys.modules[m] = None  # an import of it raises ImportError while cma imports
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # cma's "could not import matplotlib.pyplot"
            import cma  # noqa: F401
    except ImportError:
        for m in [m for m in sys.modules if m == "cma" or m.startswith("cma.")]:
            del sys.modules[m]
    finally:
        for m in held:
            if sys.modules.get(m, 0) is None:
                del sys.modules[m]
    import cma  # noqa: F401,F811  (as usual when the lean import failed)


def init_worker(queue, driver_pid: int | None = None) -> None:
    """Set up a pool process: progress queue, SIGTERM as a clean stop, Ctrl-C left to the
    driver, death with the driver (``driver_pid``, the process that started this one), and
    cma imported without what a search never uses (:func:`import_cma_lean`)."""
    global _QUEUE
    _QUEUE = queue
    import_cma_lean()
    # a log HDF5 could not close (a full disk) is never collected: the process leaves first;
    # h5py's messages about that file's leftover objects are dropped (the run says it)
    atexit.register(leave_if_unclosed, 0)
    quiet_refused_writes()
    signal.signal(signal.SIGTERM, _on_sigterm)
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # the driver decides; it terminates us
    if driver_pid is not None:
        _die_with_parent()
        threading.Thread(target=_watch_driver, args=(driver_pid,), daemon=True,
                         name="foilmap-driver-watch").start()


#: attempts of a run inside one task before it is recorded as failed (each resumes from the
#: run's own checkpoint)
RUN_ATTEMPTS = 3


def _dask_task_gone():
    """In a Dask task: a function answering True once the task is no longer wanted (asked at
    most once a second), else None outside Dask.  No longer wanted: the scheduler cancelled or
    released it (its client closed, or lost: the scheduler drops a vanished client's tasks), or
    the worker process was re-parented (its nanny gone; with a LocalCluster that is the
    driver itself, killed outright)."""
    try:
        from distributed import get_worker
        from distributed.worker import thread_state

        w = get_worker()
        key = thread_state.key
    except (ImportError, ValueError, AttributeError):
        return None
    last = [time.monotonic()]
    parent = os.getppid()

    def gone() -> bool:
        now = time.monotonic()
        if now - last[0] < 1.0:
            return False
        last[0] = now
        if os.getppid() != parent:
            return True
        try:
            ts = w.state.tasks.get(key)
        except Exception:  # noqa: BLE001 - a worker shutting down
            return True
        return ts is None or ts.state in ("cancelled", "released", "forgotten")

    return gone


def disk_problem(exc: BaseException) -> str | None:
    """``"no space left on device"`` (or read-only, over quota) when ``exc`` says the disk
    refused a write, else None (HDF5's errors carry the reason in their text only)."""
    import errno

    reasons = {errno.ENOSPC: "no space left on device", errno.EDQUOT: "disk quota exceeded",
               errno.EROFS: "read-only file system"}
    if isinstance(exc, OSError) and exc.errno in reasons:
        return reasons[exc.errno]
    text = str(exc).lower()
    for reason in reasons.values():
        if reason in text:
            return reason
    return None


def worker(study: Study, run_id: str, out: str) -> dict:
    """Run one run where the task lands (a pool process or a Dask worker); returns a summary.

    The worker gets the validated study object (its budget applied, start files already read
    and fitted), never its text to parse again.  A run that raises is retried (from its
    checkpoint) up to :data:`RUN_ATTEMPTS` times, then recorded as failed with its error; the
    study goes on with the rest.  A run whose lock another process keeps is refused at once.
    In a Dask task the run commits and stops within about a second once the task is no longer
    wanted (its client gone or cancelled).
    """
    run = study.run(run_id)
    q = _QUEUE
    report = (lambda m: q.put(m)) if q is not None else None
    stop = (lambda: _STOP["requested"]) if q is not None else _dask_task_gone()
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
                if exc.code == 143:  # a Dask task nobody wants any more: committed, stopped
                    return {"run": run_id, "state": RunState.INTERRUPTED.value}
                raise
            except Busy as exc:  # another writer: retrying here would only wait again
                error = str(exc)
                break
            except Exception as exc:  # a failing run is recorded, the study goes on
                error = f"{type(exc).__name__}: {exc}"
                disk = disk_problem(exc)
                if disk:  # a full or read-only disk: retrying would only fail again
                    error = f"{disk}; free space or make the folder writable, then foilmap resume"
                    break
    finally:
        _STOP["in_run"] = False
    if _STOP["requested"] and _QUEUE is not None:
        os._exit(143)
    return {"run": run_id, "state": RunState.FAILED.value, "error": error, "attempts": RUN_ATTEMPTS}
