"""The Dask engine: runs as tasks on a Dask cluster (``pip install -e ".[cluster]"``).

Each task runs one run with :func:`foilmap.run.single.worker` on the worker, which writes the run's
own log and checkpoint on the shared filesystem and returns only a small summary.  Tasks are
submitted with ``pure=False`` (Dask would otherwise merge identical calls) and collected as they
complete, their results released at once.  A worker that dies takes its task with it; the
scheduler gives the task to another worker, where the run resumes from its checkpoint; after
``allowed-failures`` deaths of its workers a run is recorded as failed and the study goes on.
Progress comes from reading the live run logs every few seconds (SWMR), not from the tasks.
"""

from __future__ import annotations

import logging
import time
import uuid
from pathlib import Path

from foilmap.errors import InputError

__all__ = ["DaskBackend", "ALLOWED_FAILURES", "POLL_SECONDS"]

#: worker deaths a task may see before it fails (Dask's distributed.scheduler.allowed-failures)
ALLOWED_FAILURES = 3
#: seconds between progress reads of the live run logs
POLL_SECONDS = 3.0


class DaskBackend:
    """A Dask client, on a given scheduler or on a LocalCluster of ``workers`` processes."""

    def __init__(self, workers: int, scheduler: str | None, out: Path):
        try:
            import dask
            from distributed import Client, LocalCluster
        except ImportError:
            raise InputError("the dask engine needs Dask: install the cluster extra with "
                             "python -m pip install -e \".[cluster]\"") from None
        dask.config.set({"distributed.scheduler.allowed-failures": ALLOWED_FAILURES})
        self.cluster = None
        if scheduler:
            try:
                self.client = Client(scheduler, timeout="20s")
            except (OSError, TimeoutError) as exc:
                raise InputError(f"cannot reach the Dask scheduler {scheduler!r}: {exc}") from None
        else:
            self.cluster = LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                                        dashboard_address=None, silence_logs=logging.ERROR)
            self.client = Client(self.cluster)
        self.out = Path(out)
        self.run_of = {}
        self._futures = []
        self._last_poll = 0.0

    def submit(self, args, run_id: str, out: Path):
        from foilmap.run.single import worker

        fut = self.client.submit(worker, *args, run_id, str(out), pure=False,
                                 key=f"foilmap-run-{run_id}-{uuid.uuid4().hex[:8]}")
        self.run_of[fut.key] = run_id
        self._futures.append(fut)
        return fut

    def wait(self, pending, timeout: float):
        from distributed import wait

        try:
            res = wait(list(pending), timeout=timeout, return_when="FIRST_COMPLETED")
        except TimeoutError:
            return set(), set(pending)
        return set(res.done), set(res.not_done)

    def result(self, fut):
        try:
            return fut.result()
        finally:
            self.run_of.pop(fut.key, None)
            fut.release()

    def messages(self):
        """Progress of the runs still out, read from their logs every few seconds."""
        now = time.monotonic()
        if now - self._last_poll < POLL_SECONDS:
            return
        self._last_poll = now
        from foilmap.store.folder import StudyFolder

        folder = StudyFolder(self.out)
        for run_id in list(self.run_of.values()):
            log = folder.log(run_id)
            if log is not None and log.generations:
                yield {"run": run_id, "generation": log.generations,
                       "evaluations": log.evaluations, "best": float(log.gen["best_f"][-1]),
                       "feasible": float(log.gen["feasible_fraction"][-1]),
                       "sigma": float(log.gen["sigma"][-1])}

    def worker_pids(self) -> dict:
        """Process ids of the workers, by address (for fault tests)."""
        import os

        return self.client.run(os.getpid)

    def abort(self) -> None:
        try:
            self.client.cancel(self._futures, force=True)
        except Exception:
            pass

    def close(self) -> None:
        try:
            self.client.close()
        finally:
            if self.cluster is not None:
                self.cluster.close()
