"""One writer per study folder and per run: a second ``run`` or ``resume`` stops at once with one
line naming the holder (or waits with ``--wait``); the lock goes with its holder, SIGKILL
included; a run another process holds is refused after a short wait."""

from __future__ import annotations

import functools
import json
import os
import signal
import subprocess
import sys
import threading
import time

import pytest
from conftest import cli, small_study

from foilmap.store.lock import Busy, Lock


@pytest.fixture(autouse=True)
def own_key(tmp_path, monkeypatch):
    monkeypatch.setenv("FOILMAP_CONFIG_DIR", str(tmp_path / "config"))


def test_a_held_lock_is_refused_naming_its_holder(tmp_path):
    p = tmp_path / "writer.lock"
    first = Lock(p, "foilmap run").acquire()
    second = Lock(p, "foilmap resume")
    assert not second.try_acquire()
    with pytest.raises(Busy) as exc:
        second.acquire(wait=0)
    msg = str(exc.value)
    assert len(msg.splitlines()) == 1
    assert f"pid {os.getpid()}" in msg and "on host " in msg and " since 20" in msg
    assert "(foilmap run)" in msg and "--wait" in msg
    assert exc.value.holder["pid"] == os.getpid()
    first.release()
    with second.acquire(wait=0):
        assert json.loads(p.read_text())["what"] == "foilmap resume"
    assert p.read_text() == ""  # released: no stale holder named


def test_a_lock_goes_with_a_killed_holder(tmp_path):
    p = tmp_path / "writer.lock"
    code = ("import sys, time; from foilmap.store.lock import Lock; "
            f"Lock({str(p)!r}, 'holder').acquire(); print('held', flush=True); time.sleep(60)")
    proc = subprocess.Popen([sys.executable, "-c", code], stdout=subprocess.PIPE, text=True)
    try:
        assert proc.stdout.readline().strip() == "held"
        assert not Lock(p, "t").try_acquire()
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait(timeout=10)
        lock = Lock(p, "t").acquire(wait=5.0)  # the kernel dropped it: no clean-up needed
        lock.release()
    finally:
        if proc.poll() is None:
            proc.kill()


def test_a_second_run_on_a_busy_folder_stops_at_once_in_one_line(tmp_path):
    study = tmp_path / "s.toml"
    study.write_text(small_study("busy", [1], 60))
    out = tmp_path / "out"
    r = cli("run", study, "--out", out, "--workers", "1")
    assert r.returncode == 0, r.stderr
    index = (out / "index.json").read_bytes()
    holder = Lock(out / "writer.lock", "foilmap run").acquire()  # another driver, here
    try:
        for args in (["run", study, "--out", out], ["resume", out]):
            r = cli(*args, timeout=60)
            assert r.returncode == 2, r.stderr
            lines = r.stderr.strip().splitlines()
            assert len(lines) == 1 and "Traceback" not in r.stderr, r.stderr
            assert f"is in use by pid {os.getpid()} on host" in lines[0] and "since" in lines[0]
        assert (out / "index.json").read_bytes() == index  # nothing touched
        # --wait waits for the holder instead, then runs
        proc = subprocess.Popen([sys.executable, "-m", "foilmap.cli", "resume", str(out),
                                 "--wait"], stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                                text=True)
        first = proc.stderr.readline()  # it says once that it waits, naming the holder
        assert "waiting for it" in first and f"pid {os.getpid()}" in first, first
        time.sleep(0.5)
        assert proc.poll() is None  # still waiting
    finally:
        holder.release()
    out_text, err = proc.communicate(timeout=120)
    assert proc.returncode == 0, err
    assert "0 runs finished now" in out_text


def test_a_run_held_elsewhere_is_refused_after_a_short_wait(tmp_path, monkeypatch):
    from foilmap.run import single
    from foilmap.store.folder import StudyFolder
    from foilmap.store.studyfile import load_study_text

    # the worker's runs wait RUN_LOCK_WAIT (30 s), execute_run's default bound when it was
    # defined: a shorter wait for this test, as a partial of execute_run
    run_for_real = single.execute_run
    monkeypatch.setattr(single, "execute_run", functools.partial(run_for_real, lock_wait=0.3))
    st = load_study_text(small_study("held", [1], 60))
    folder, st = StudyFolder.prepare(st, tmp_path / "o", None)
    run_lock = Lock(folder.log_path("p.s1").with_suffix(".lock"), "run p.s1").acquire()
    try:
        s = single.worker(st, "p.s1", str(folder.path))
        assert s["state"] == "failed" and "run p.s1 is in use by pid" in s["error"]
        assert not folder.log_path("p.s1").exists()  # nothing written under another's lock
    finally:
        run_lock.release()
    # a holder that lets go within the wait (an orphan committing) is waited for
    monkeypatch.setattr(single, "execute_run", functools.partial(run_for_real, lock_wait=30.0))
    run_lock = Lock(folder.log_path("p.s1").with_suffix(".lock"), "run p.s1").acquire()
    threading.Timer(0.5, run_lock.release).start()
    s = single.worker(st, "p.s1", str(folder.path))
    assert s["state"] == "complete"
