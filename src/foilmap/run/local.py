"""The local engine: runs of a study in spawned worker processes on this machine.

:func:`drive_study` prepares the study folder (:class:`~foilmap.store.folder.StudyFolder`),
hands every unfinished run to an engine (this machine's process pool, or a Dask cluster through
:mod:`foilmap.run.cluster`), keeps the index and the progress as runs report, and on the first
Ctrl-C or SIGTERM commits every run, marks the unfinished ones interrupted and leaves no process
behind.  Re-running a study skips complete runs and resumes unfinished ones from their
checkpoints.
"""

from __future__ import annotations

import contextlib
import multiprocessing as mp
import os
import signal
import sys
import threading
import time
import types
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool
from pathlib import Path

from foilmap.design.results import RunState
from foilmap.design.study import RunSpec, Study
from foilmap.errors import InputError
from foilmap.run.single import RUN_ATTEMPTS, disk_problem, execute_run, init_worker, worker
from foilmap.store.lock import Busy
from foilmap.store.folder import INDEXED, StudyFolder
from foilmap.store.lock import FOLDER_LOCK, Lock

__all__ = ["drive_study", "ABORT_GRACE", "workers_without_main"]

#: seconds an interrupted study gives its workers to commit before they are killed
ABORT_GRACE = 20.0
#: least seconds between two rewrites of the index while runs start and end (the study's end
#: and an interrupt write it at once)
INDEX_INTERVAL = 0.5


# --- the local process pool --------------------------------------------------------------------


def _todo(folder: StudyFolder, states: dict) -> list[RunSpec]:
    todo = []
    for r in folder.study.runs():
        log = folder.log(r.run_id)  # read once: the complete check and the summary share it
        if log is not None and log.state is RunState.COMPLETE:
            s = folder.summary(r.run_id, log)
            states[r.run_id] = {k: s[k] for k in INDEXED if s.get(k) is not None}
        else:
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


@contextlib.contextmanager
def workers_without_main():
    """Processes spawned inside this block do not run the caller's main module again.

    multiprocessing's spawn start re-imports the parent's ``__main__`` (the script, or the
    module of ``python -m``) in every child, so that a script that starts a study without the
    ``if __name__ == "__main__":`` guard would start it again in each worker and break the pool.
    A worker needs nothing from the caller's main module (it gets the validated study and
    imports foilmap), so the children are started as modules of their own: while they start,
    ``sys.modules["__main__"]`` is a stand-in without a file or a module name, which the spawn
    preparation then leaves out.  The caller's module is back in place when the block ends.
    """
    main = sys.modules.get("__main__")
    stand_in = types.ModuleType("__main__", "stand-in while foilmap starts its workers")
    stand_in.__spec__ = None
    sys.modules["__main__"] = stand_in
    try:
        yield
    finally:
        if main is None:
            sys.modules.pop("__main__", None)
        else:
            sys.modules["__main__"] = main


def drive_study(study: Study, out: Path, workers: int | None = None, budget: int | None = None,
               progress=None, engine: str | None = None, scheduler: str | None = None,
               wait: float | None = 0.0, what: str = "foilmap run", on_wait=None) -> list[dict]:
    """Run every unfinished run of a study; returns the summaries of the runs run now.

    ``engine`` is ``"local"`` (a process pool of ``workers`` on this machine) or ``"dask"`` (a
    Dask cluster at ``scheduler``, or a LocalCluster of ``workers`` when no address is given).
    The same study and seeds give the same logs on every engine.  What is not given comes
    from the study's ``[engine]`` table.

    One driver writes a study folder at a time: the folder's lock (``DIR/writer.lock``) is held
    throughout.  When another process holds it, ``wait`` says how long to wait for it (seconds;
    None: for ever; 0, the default: not at all) before :class:`~foilmap.store.lock.Busy` (an
    ``InputError``) names the holder in one line; ``what`` is how this driver names itself there,
    and ``on_wait(holder)`` is called once if it waits.
    """
    engine = engine or study.engine["kind"]
    scheduler = scheduler if scheduler is not None else (study.engine["scheduler"] or None)
    workers = workers or study.engine["workers"] or None
    if workers is not None and workers < 1:
        raise InputError(f"workers = {workers!r} is out of range (allowed: 1 or more)")
    if scheduler and engine != "dask":
        raise InputError("a scheduler address needs the dask engine (engine = dask, or "
                         "kind = \"dask\" in [engine])")
    if engine not in ("local", "dask"):
        raise InputError(f"engine {engine!r} is not one of: local, dask")
    out = Path(out)
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"cannot create the study folder {str(out)!r}: "
                         f"{exc.strerror or exc}") from None
    lock = Lock(out / FOLDER_LOCK, what, label=f"study folder {str(out)!r}")
    lock.acquire(wait=wait, on_wait=on_wait)
    try:
        return _run_locked(study, out, workers, budget, progress, engine, scheduler)
    except OSError as exc:
        disk = disk_problem(exc)
        if disk is None:
            raise
        where = f" ({exc.filename})" if getattr(exc, "filename", None) else ""
        raise InputError(f"study folder {str(out)!r}: {disk}{where}; free space or make it "
                         "writable, then foilmap resume") from None
    finally:
        lock.release()


def _run_locked(study, out, workers, budget, progress, engine, scheduler) -> list[dict]:
    # a budget set on the study object is recorded like --budget, so that resume keeps it
    folder, study = StudyFolder.prepare(study, out,
                                        budget if budget is not None else study.budget)
    runs = study.runs()
    here = workers == 1 and engine == "local"  # one worker asked for: this process, no pool
    workers = max(1, min(workers or os.cpu_count() or 1, len(runs)))
    states: dict[str, dict] = {}
    todo = _todo(folder, states)
    folder.write_index(states)
    if progress is not None:
        progress.total_runs = len(runs)
        progress.done = len(runs) - len(todo)
    if not todo:
        return []
    if here:
        return _drive(_InProcessBackend(), folder, todo, (study,), states, progress)
    if min(workers, len(todo)) > 1:
        # several workers start at once: compile here first (once per kernel version), so
        # that they load the compiled kernel from the cache instead of each compiling it; a
        # single worker loads it itself (loading it here too cost every study a second)
        from foilmap.section import _compiled

        _compiled.warm_cache()
    args = (study,)
    # a LocalCluster starts its workers here: single-threaded, and without the caller's script
    with _single_threaded_kernels(), workers_without_main():
        if engine == "dask":
            from foilmap.run.cluster import DaskBackend

            backend = DaskBackend(workers, scheduler, out)
        else:
            backend = _LocalBackend(workers)
    return _drive(backend, folder, todo, args, states, progress)


class _LocalBackend:
    """The default engine: spawned worker processes on this machine."""

    def __init__(self, workers: int):
        ctx = mp.get_context("spawn")
        self.queue = ctx.Queue()
        # each worker dies with this driver (init_worker: parent-death signal and a watcher)
        self.pool = ProcessPoolExecutor(max_workers=workers, mp_context=ctx,
                                        initializer=init_worker,
                                        initargs=(self.queue, os.getpid()))

    def submit(self, args, run_id: str, out: Path):
        # the pool starts its workers on submission: single-threaded kernels, and never the
        # caller's script again (a script without the main guard works)
        with _single_threaded_kernels(), workers_without_main():
            return self.pool.submit(worker, *args, run_id, str(out))

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


class _Task:
    """A run the in-process engine will run when it is waited for."""

    def __init__(self, args, run_id: str, out: Path):
        self.args, self.run_id, self.out = args, run_id, Path(out)
        self.summary = None
        self.order = 0


class _InProcessBackend:
    """``workers = 1``: the runs one after another in the calling process, no pool.

    Progress goes to the driver as the run commits (``on_message``).  While a run runs, Ctrl-C
    and SIGTERM (from the main thread's handlers, restored after) ask it to commit at the end of
    its generation, as a pool worker does; then KeyboardInterrupt (Ctrl-C) or SystemExit(143)
    ends the study, and calling again resumes it.
    """

    def __init__(self):
        self._inbox: list[dict] = []
        self._signal = None
        self.on_message = None
        self.on_start = None

    def submit(self, args, run_id: str, out: Path):
        return _Task(args, run_id, out)

    def _report(self, msg: dict) -> None:
        self._inbox.append(msg)
        if self.on_message is not None:
            self.on_message()

    def _run(self, task: _Task) -> dict:
        (study,) = task.args
        run = study.run(task.run_id)
        if self.on_start is not None:
            self.on_start(task.run_id)
        error = None
        for _ in range(RUN_ATTEMPTS):
            try:
                return execute_run(study, run, task.out, self._report,
                                   lambda: self._signal is not None)
            except Busy as exc:  # another writer: retrying would only wait again
                error = str(exc)
                break
            except Exception as exc:  # a failing run is recorded, the study goes on
                error = f"{type(exc).__name__}: {exc}"
                disk = disk_problem(exc)
                if disk:
                    error = f"{disk}; free space or make the folder writable, then foilmap resume"
                    break
        return {"run": task.run_id, "state": RunState.FAILED.value, "error": error,
                "attempts": RUN_ATTEMPTS}

    def wait(self, pending, timeout: float):  # noqa: ARG002 - runs the next run whole
        task = min(pending, key=lambda t: t.order)
        main = threading.current_thread() is threading.main_thread()
        old = {}

        def stop(signum, frame):  # noqa: ARG001 - commit at the end of the generation
            self._signal = signum

        if main:
            old = {sig: signal.signal(sig, stop) for sig in (signal.SIGINT, signal.SIGTERM)}
        try:
            task.summary = self._run(task)
        except SystemExit as exc:
            if exc.code == 143 and self._signal == signal.SIGINT:
                raise KeyboardInterrupt from None
            if exc.code == 143 and self._signal is not None:
                raise SystemExit(128 + int(self._signal)) from None
            raise
        finally:
            for sig, handler in old.items():
                signal.signal(sig, handler)
        return {task}, pending - {task}

    def result(self, task: _Task) -> dict:
        return task.summary

    def messages(self):
        while self._inbox:
            yield self._inbox.pop(0)

    def abort(self) -> None:  # the run committed before it stopped
        pass

    def close(self) -> None:
        pass


def _drive(backend, folder: StudyFolder, todo, args, states, progress) -> list[dict]:
    """Submit every run, collect them as they complete, keep the index and the progress."""
    summaries = []
    due = [0.0]  # when the index may be written again (monotonic seconds)
    stale = [False]  # states changed since the index was last written

    def write_index(now: bool = False) -> None:
        """Rewrite the index, at most every INDEX_INTERVAL while runs start and end (a thousand
        tiny runs otherwise rewrite an index of a thousand entries two thousand times): what
        changed meanwhile is written by the loop's next turn, within INDEX_INTERVAL.  ``now``
        for an interrupt and for a run the calling process starts."""
        t = time.monotonic()
        if now or t >= due[0]:
            folder.write_index(states)
            due[0], stale[0] = t + INDEX_INTERVAL, False
        else:
            stale[0] = True

    if isinstance(backend, _InProcessBackend):
        def live():
            if _drain(backend.messages(), progress, states) or stale[0]:
                write_index()  # live status sees the run as running

        def start(run_id):  # (the loop does not turn while this process runs the run)
            states.setdefault(run_id, {})["state"] = RunState.RUNNING.value
            write_index(now=True)

        backend.on_message = live
        backend.on_start = start
    try:
        futures = {backend.submit(args, r.run_id, folder.path): r for r in todo}
        for order, fut in enumerate(futures):
            if isinstance(fut, _Task):
                fut.order = order
        for r in todo:
            states[r.run_id] = {"state": RunState.QUEUED.value}
        pending = set(futures)
        while pending:
            done, pending = backend.wait(pending, 0.5)
            if _drain(backend.messages(), progress, states) or stale[0]:
                write_index()  # live status sees the run as running
            for fut in done:
                r = futures.pop(fut)
                try:
                    s = backend.result(fut)
                except BrokenProcessPool:  # a worker was killed: the pool stops them all
                    s = {"run": r.run_id, "state": RunState.INTERRUPTED.value,
                         "error": "a worker process of the study ended abruptly (killed, or "
                                  f"crashed){_full_disk(folder.path)}; foilmap resume "
                                  "continues the run from its last commit"}
                except Exception as exc:  # the worker process itself died, too often
                    s = {"run": r.run_id, "state": RunState.FAILED.value,
                         "error": f"{type(exc).__name__}: {exc}"}
                summaries.append(s)
                note = states.get(r.run_id, {}).get("note")
                for line in s.get("notes", []):
                    if line != note:
                        _say(progress, line)
                        note = line
                states[r.run_id] = {k: s.get(k) for k in INDEXED + ("error",)
                                    if s.get(k) is not None}
                if note:
                    states[r.run_id]["note"] = note
                if progress is not None:
                    progress.run_ended(r.run_id, s["state"], s.get("best"), s.get("error"), s)
                write_index()
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
                if st.get("state") in (RunState.QUEUED.value, RunState.RUNNING.value):
                    st["state"] = RunState.INTERRUPTED.value
            backend.abort()
            write_index(now=True)
        finally:
            for sig, handler in old.items():
                signal.signal(sig, handler)
        raise
    finally:
        backend.close()
        if progress is not None:
            progress.close()
    folder.write_index(states)
    return summaries


def _full_disk(path) -> str:
    """``", with no space left on device (N KB free)"`` when the folder's disk is (nearly) full:
    HDF5 can crash a process whose write failed for want of space."""
    try:
        st = os.statvfs(path)
    except OSError:
        return ""
    free = st.f_bavail * st.f_frsize
    if free < max(1 << 20, 0.001 * st.f_blocks * st.f_frsize):
        return f", with no space left on device ({free // 1024} KB free)"
    return ""


def _say(progress, line: str) -> None:
    """One line about a run (a repair on resume) where the progress goes: standard error."""
    stream = getattr(progress, "stream", None) or sys.stderr
    if getattr(progress, "tty", False):
        stream.write("\r\033[K")
    stream.write(line + "\n")
    stream.flush()


def _drain(messages, progress, states) -> bool:
    """Take the workers' progress messages; True when a run has just started running."""
    started = False
    for msg in messages:
        st = states.setdefault(msg["run"], {})
        if "note" in msg:  # a run's files needed repair: one line, kept in the index
            st["note"] = msg["note"]
            _say(progress, msg["note"])
            started = True  # (the index is rewritten)
            continue
        if st.get("state") not in (RunState.COMPLETE.value, RunState.FAILED.value,
                                 RunState.RUNNING.value):  # not a late message
            st["state"] = RunState.RUNNING.value
            started = True
        if progress is not None:
            progress.update(msg)
    return started
