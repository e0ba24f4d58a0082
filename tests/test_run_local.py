"""The local engine's driver and its workers: after Ctrl-C or SIGTERM the driver exits only after
its workers have (so a resume typed at once never meets one), and a worker whose driver is
killed outright commits and stops within a second.  Real processes, bounded loops."""

from __future__ import annotations

import os
import random
import signal
import subprocess
import sys
import time

import pytest
from conftest import reference_folder, small_study
from faultkit import alive, check_driver_gone, start, wait_gone, wait_running, workers_of
from test_search import logs_equal

from foilmap.store.lock import Lock

RUNS = ("p.s1", "p.s2")


@pytest.fixture(scope="module")
def key_dir(tmp_path_factory):
    d = tmp_path_factory.mktemp("config")
    mp = pytest.MonkeyPatch()
    mp.setenv("FOILMAP_CONFIG_DIR", str(d))
    yield d
    mp.undo()


@pytest.fixture(scope="module")
def ref(tmp_path_factory, key_dir):
    """The uninterrupted study (two runs of 3,000 evaluations; the fault tests' quick one)."""
    return reference_folder(tmp_path_factory, small_study("faults", [1, 2], 3000))


def interrupt_loop(tries: int, sf, ref, out, seed: int) -> None:
    rng = random.Random(seed)
    for k in range(tries):
        sig = signal.SIGINT if k % 2 == 0 else signal.SIGTERM
        args = (["run", sf, "--out", out] if k == 0 else ["resume", out]) + ["--workers", "2"]
        proc = start(args)
        if not wait_running(out, proc, RUNS):
            proc.communicate(timeout=60)
            continue
        time.sleep(rng.uniform(0.0, 1.0))
        ws = workers_of(proc.pid)
        if proc.poll() is not None:
            proc.communicate(timeout=60)
            continue
        os.kill(proc.pid, sig)  # the driver alone, as a scheduler's SIGTERM or a kill does
        _, err = proc.communicate(timeout=60)
        check_driver_gone(ws, out, RUNS)
        assert proc.returncode in (0, 130, 143), err
        assert "Traceback" not in err, err
    r = subprocess.run([sys.executable, "-m", "foilmap.cli", "resume", str(out), "--workers", "2"],
                       capture_output=True, text=True, timeout=600)
    assert r.returncode == 0, r.stderr
    for run_id in RUNS:
        logs_equal(ref / "runs" / f"{run_id}.h5", out / "runs" / f"{run_id}.h5")


def test_the_driver_exits_after_its_workers(tmp_path, ref):
    # the quick form (SIGINT, then SIGTERM, to the driver alone); the slow loop of eight, half
    # of them to the driver alone, is test_search.py's interrupt series
    sf, ref_dir = ref
    interrupt_loop(2, sf, ref_dir, tmp_path / "cut", seed=1)


@pytest.mark.slow  # (the quick subset kills a driver in test_faults.py)
def test_workers_stop_within_a_second_of_a_killed_driver(tmp_path, ref):
    # SIGKILL to the driver alone (the out-of-memory killer, kill -9): its workers see it,
    # commit and leave; the runs' locks are free again and resume continues them
    sf, ref_dir = ref
    out = tmp_path / "cut"
    proc = start(["run", sf, "--out", out, "--workers", "2"])
    assert wait_running(out, proc, RUNS)
    time.sleep(0.5)
    ws = workers_of(proc.pid)
    assert ws
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait(timeout=30)
    took = wait_gone(ws, 10.0)
    # within a second on an idle machine; the slack covers a loaded 2-core machine
    assert took < 4.0, f"orphaned workers lived {took:.2f} s"
    for r in RUNS:
        lock = Lock(out / "runs" / f"{r}.lock", "test")
        assert lock.try_acquire()
        lock.release()
    r = subprocess.run([sys.executable, "-m", "foilmap.cli", "resume", str(out), "--workers", "2"],
                       capture_output=True, text=True, timeout=600)
    assert r.returncode == 0, r.stderr
    assert "restarts from its seed" not in r.stderr  # the orphans committed consistently
    for run_id in RUNS:
        logs_equal(ref_dir / "runs" / f"{run_id}.h5", out / "runs" / f"{run_id}.h5")


def _linger_on_sigterm(marker: str) -> None:
    """A task whose process needs most of a second to leave after SIGTERM (a slow commit)."""

    def slow_exit(*_):
        time.sleep(0.8)
        os._exit(143)

    signal.signal(signal.SIGTERM, slow_exit)
    with open(marker, "w") as fh:
        fh.write(str(os.getpid()))
    while True:
        time.sleep(0.05)


def test_abort_returns_only_when_every_worker_has_exited(tmp_path):
    from foilmap.run.local import _LocalBackend

    backend = _LocalBackend(1)
    marker = tmp_path / "pid"
    backend.pool.submit(_linger_on_sigterm, str(marker))
    t0 = time.monotonic()
    while not marker.exists() or not marker.read_text():
        assert time.monotonic() - t0 < 60, "the worker did not start"
        time.sleep(0.05)
    pid = int(marker.read_text())
    backend.abort()
    assert not alive(pid), "abort returned while its worker was still committing"
    backend.close()


def test_the_index_is_rewritten_at_most_twice_a_second_and_ends_whole(tmp_path, monkeypatch):
    # forty tiny runs on two workers start and end far faster than INDEX_INTERVAL apart: the
    # driver writes the index as they come, at most once per interval, and whole at the end
    from foilmap.run import local
    from foilmap.run.local import drive_study
    from foilmap.store.folder import StudyFolder
    from foilmap.store.studyfile import load_study_text

    writes = []
    real = StudyFolder.write_index

    def counted(self, states):
        writes.append(time.monotonic())
        real(self, states)

    monkeypatch.setattr(StudyFolder, "write_index", counted)
    t0 = time.monotonic()
    drive_study(load_study_text(small_study("ix", range(1, 41), 10)), tmp_path / "o", workers=2)
    took = time.monotonic() - t0
    # one before the runs, one at the end, and at most one per interval between
    assert len(writes) <= took / local.INDEX_INTERVAL + 3, (len(writes), took)
    index = StudyFolder(tmp_path / "o").read_index()
    assert len(index) == 40 and {e["state"] for e in index.values()} == {"complete"}
