"""Studies beyond one machine: the Dask engine gives the local engine's logs, survives a killed
worker and a killed driver; the local engine carries a thousand tiny runs.  Real processes,
loopback only (LocalCluster), bounded in time."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
from conftest import reference_folder, small_study
from test_search import logs_equal

from foilmap.run.local import drive_study
from foilmap.store.runlog import read_run
from foilmap.store.studyfile import load_study_text

pytestmark = pytest.mark.slow


@pytest.fixture(autouse=True)
def own_key(tmp_path, monkeypatch):
    """The checkpoint key in a temporary folder, never the real home."""
    monkeypatch.setenv("FOILMAP_CONFIG_DIR", str(tmp_path / "config"))

def study(n: int, evals: int):
    return load_study_text(small_study("cluster", range(1, n + 1), evals))


def all_equal(a: Path, b: Path, st) -> None:
    for r in st.runs():
        logs_equal(a / "runs" / f"{r.run_id}.h5", b / "runs" / f"{r.run_id}.h5")


def test_forty_runs_on_a_local_cluster_match_the_local_engine(tmp_path):
    st = study(40, 120)
    drive_study(st, tmp_path / "local", workers=2)
    summ = drive_study(st, tmp_path / "dask", workers=2, engine="dask")
    assert len(summ) == 40 and all(s["state"] == "complete" for s in summ)
    all_equal(tmp_path / "local", tmp_path / "dask", st)
    index = json.loads((tmp_path / "dask" / "index.json").read_text())
    assert [e["state"] for e in index["runs"]] == ["complete"] * 40


def test_a_killed_worker_costs_nothing(tmp_path, tmp_path_factory):
    from foilmap.run.cluster import DaskBackend

    st = study(6, 2500)
    _, ref = reference_folder(tmp_path_factory, st.text)
    out = tmp_path / "dask"
    killed = {}
    original = DaskBackend.wait

    def wait_and_kill(self, pending, timeout):
        # once a run has committed a few generations, SIGKILL the worker that runs it
        if not killed:
            for key, run_id in list(self.run_of.items()):
                log = out / "runs" / f"{run_id}.h5"
                try:
                    gens = read_run(log).generations if log.exists() else 0
                except Exception:
                    gens = 0
                if gens >= 20:
                    where = self.client.who_has()
                    proc = self.client.processing()
                    addr = next((a for a, keys in proc.items() if key in keys), None)
                    if addr is not None:
                        pid = self.worker_pids()[addr]
                        os.kill(pid, signal.SIGKILL)
                        killed.update(run=run_id, pid=pid, gens=gens)
                        del where
                        break
        return original(self, pending, timeout)

    DaskBackend.wait = wait_and_kill
    try:
        summ = drive_study(st, out, workers=2, engine="dask")
    finally:
        DaskBackend.wait = original
    assert killed, "no run was caught in flight"
    assert all(s["state"] == "complete" for s in summ) and len(summ) == 6
    all_equal(ref, out, st)  # nothing duplicated, nothing lost
    assert read_run(out / "runs" / f"{killed['run']}.h5").resumes >= 1  # resumed, not restarted


def test_a_killed_driver_resumes(tmp_path, tmp_path_factory):
    # two runs, the study (and so the reference) of the killed-driver-alone test below
    st = study(2, 3000)
    sf, ref = reference_folder(tmp_path_factory, st.text)
    out = tmp_path / "cut"
    proc = subprocess.Popen([sys.executable, "-m", "foilmap.cli", "run", str(sf), "--out",
                             str(out), "--engine", "dask", "--workers", "2"],
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                            start_new_session=True)
    t0 = time.time()
    caught = False
    while time.time() - t0 < 120 and not caught:
        assert proc.poll() is None, "the driver ended before it could be killed"
        logs = list((out / "runs").glob("*.h5")) if (out / "runs").exists() else []
        try:
            caught = any(read_run(p).generations >= 20 for p in logs)
        except Exception:
            pass
        time.sleep(0.1)
    assert caught, "no run reached 20 generations in 120 s"
    assert proc.poll() is None  # killed mid-run, not after the study ended
    os.killpg(proc.pid, signal.SIGKILL)  # the driver and its LocalCluster
    proc.wait(timeout=60)
    cut = {}
    for p in (out / "runs").glob("*.h5"):
        try:
            cut[p.name] = read_run(p)
        except Exception:  # a log cut while it was created: resume starts it afresh
            pass
    unfinished = [n for n, log in cut.items() if log.state_name != "complete"]
    assert unfinished, "every run had finished when the driver was killed"
    r = subprocess.run([sys.executable, "-m", "foilmap.cli", "resume", str(out), "--engine",
                        "dask", "--workers", "2"], capture_output=True, text=True, timeout=300)
    assert r.returncode == 0, r.stderr
    all_equal(ref, out, st)
    # the runs cut after 20 generations went on from their checkpoints, not from scratch
    resumed = [read_run(out / "runs" / n).resumes for n in unfinished
               if cut[n].generations >= 20]
    assert resumed and min(resumed) >= 1, resumed


def test_a_thousand_tiny_runs_on_the_local_engine(tmp_path):
    st = study(1000, 10)
    t0 = time.time()
    summ = drive_study(st, tmp_path / "load", workers=2)
    took = time.time() - t0
    assert len(summ) == 1000 and all(s["state"] == "complete" for s in summ)
    index = json.loads((tmp_path / "load" / "index.json").read_text())
    assert len(index["runs"]) == 1000
    assert {e["state"] for e in index["runs"]} == {"complete"}
    t1 = time.time()
    r = subprocess.run([sys.executable, "-m", "foilmap.cli", "status", str(tmp_path / "load"),
                        "--json"], capture_output=True, text=True, timeout=300)
    status_s = time.time() - t1
    assert r.returncode == 0, r.stderr
    st_json = json.loads(r.stdout)
    assert st_json["counts"] == {"complete": 1000}
    # figures for the record (not asserted): printed with -s
    print(f"\n1000 tiny runs: {took:.1f} s ({1000 / took * 60:.0f} runs/min); "
          f"status of 1000 runs: {status_s:.2f} s")


def test_a_run_that_keeps_failing_is_recorded_and_the_rest_finish(tmp_path):
    st = study(4, 60)
    out = tmp_path / "f"
    (out / "runs" / "p.s2.h5").mkdir(parents=True)  # its log cannot be written: every attempt fails
    for engine in ("local", "dask"):
        summ = drive_study(st, out, workers=2, engine=engine)
        failed = [s for s in summ if s["state"] == "failed"]
        assert [s["run"] for s in failed] == ["p.s2"]
        assert failed[0]["attempts"] == 3 and "Error" in failed[0]["error"]
        index = {e["run"]: e for e in json.loads((out / "index.json").read_text())["runs"]}
        assert index["p.s2"]["state"] == "failed" and "error" in index["p.s2"]
        assert all(index[f"p.s{i}"]["state"] == "complete" for i in (1, 3, 4))


def test_a_killed_driver_alone_frees_its_runs_and_resumes_at_once(tmp_path, tmp_path_factory):
    # SIGKILL to the driver alone: the LocalCluster's worker processes are re-parented, their
    # tasks commit and stop, the runs' locks are free within a second or two; a resume started
    # at once finishes with the same bits
    from faultkit import generations

    from foilmap.store.lock import Lock

    st = study(2, 3000)
    sf, ref = reference_folder(tmp_path_factory, st.text)
    out = tmp_path / "cut"
    proc = subprocess.Popen([sys.executable, "-m", "foilmap.cli", "run", str(sf), "--out",
                             str(out), "--engine", "dask", "--workers", "2"],
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                            start_new_session=True)
    t0 = time.time()
    while time.time() - t0 < 120 and generations(out / "runs" / "p.s1.h5") < 20:
        assert proc.poll() is None
        time.sleep(0.05)
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait(timeout=60)
    r = subprocess.run([sys.executable, "-m", "foilmap.cli", "resume", str(out), "--engine",
                        "dask", "--workers", "2"], capture_output=True, text=True, timeout=300)
    assert r.returncode == 0, r.stderr
    assert "restarts from its seed" not in r.stderr
    all_equal(ref, out, st)
    for run in st.runs():
        with Lock(out / "runs" / f"{run.run_id}.lock", "t").acquire(wait=0):
            pass
