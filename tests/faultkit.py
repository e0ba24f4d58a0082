"""Helpers of the fault tests: real driver processes, their workers, kills and damage."""

from __future__ import annotations

import json
import os
import subprocess
import sys
import time
from pathlib import Path



def start(args: list, env: dict | None = None) -> subprocess.Popen:
    """``foilmap ARGS`` in its own session (so that the test can kill its process group)."""
    return subprocess.Popen([sys.executable, "-m", "foilmap.cli", *map(str, args)],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            start_new_session=True, env=env)


def children(pid: int) -> list[tuple[int, str]]:
    """(pid, command line) of the live children of ``pid``."""
    out = []
    for d in os.listdir("/proc"):
        if not d.isdigit():
            continue
        try:
            with open(f"/proc/{d}/stat") as fh:
                fields = fh.read().rsplit(")", 1)[1].split()
            if int(fields[1]) != pid or fields[0] == "Z":
                continue
            with open(f"/proc/{d}/cmdline") as fh:
                out.append((int(d), fh.read().replace("\0", " ")))
        except (OSError, ValueError, IndexError):
            pass
    return out


def workers_of(pid: int) -> list[int]:
    """The pool worker processes of a driver (not multiprocessing's resource tracker)."""
    return [p for p, cmd in children(pid) if "spawn_main" in cmd]


def alive(pid: int) -> bool:
    try:
        with open(f"/proc/{pid}/stat") as fh:
            return fh.read().rsplit(")", 1)[1].split()[0] != "Z"
    except OSError:
        return False


def check_driver_gone(workers, out: Path, run_ids) -> None:
    """What must hold the moment a driver has exited: its workers have gone too, and the
    runs' locks are free (a resume typed at once never meets one)."""
    from foilmap.store.lock import Lock

    still = [w for w in workers if alive(w)]
    assert not still, f"workers outlived their driver: {still}"
    for r in run_ids:
        lock = Lock(out / "runs" / f"{r}.lock", "test")
        assert lock.try_acquire(), f"run {r} still held after its driver exited"
        lock.release()


def wait_gone(pids, timeout: float) -> float:
    """Seconds until every process of ``pids`` has exited (or ``timeout``)."""
    t0 = time.monotonic()
    while any(alive(p) for p in pids) and time.monotonic() - t0 < timeout:
        time.sleep(0.005)
    return time.monotonic() - t0


def generations(log: Path) -> int:
    """Generations a run's log holds, read without HDF5's file lock: a reader holding the lock
    when a resume reopens the log makes the writer's open fail (BlockingIOError, errno 11), so
    a test that polls must not take it (``foilmap status`` and ``read_run`` do take it)."""
    import h5py

    from foilmap.store.runlog import _check_length

    try:
        # a log truncated on purpose first: HDF5's SWMR reader retries the missing metadata
        # for minutes (what the store's reader checks too); a poll does not wait for a flush
        # to land, it looks again
        _check_length(log, settle=False)
        with h5py.File(log, "r", libver="latest", swmr=True, locking=False) as f:
            return int(f["gen/evaluations"].shape[0])
    except Exception:  # noqa: BLE001 - missing, being written, or damaged on purpose
        return 0


def wait_running(out: Path, proc, run_ids, timeout: float = 120.0) -> bool:
    """Wait until one of the runs has logged a generation since this call (so that a resumed
    folder's old generations do not count: the driver may still be importing); False when
    the driver ended first."""
    base = {r: generations(out / "runs" / f"{r}.h5") for r in run_ids}
    t0 = time.monotonic()
    while time.monotonic() - t0 < timeout:
        if proc.poll() is not None:
            return False
        if any(generations(out / "runs" / f"{r}.h5") > base[r] for r in run_ids):
            return True
        time.sleep(0.05)
    raise AssertionError("no run made progress")


def index_states(out: Path) -> dict:
    return {e["run"]: e["state"] for e in json.loads((out / "index.json").read_text())["runs"]}


def notes_in(stderr: str) -> list[str]:
    """The repair notes a resume printed (one line each, ``run ID: ...``)."""
    return [line for line in stderr.splitlines() if line.startswith("run ")
            and ("restarts from its seed" in line or "keeps its" in line)]
