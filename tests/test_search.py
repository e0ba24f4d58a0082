"""Searches and run logs: same seed same bits, resume after SIGKILL and SIGTERM, live status,
the documented log schema, and the best design re-evaluated from its section file."""

from __future__ import annotations

import json
import os
import re
import signal
import subprocess
import sys
import time
from pathlib import Path

import h5py
import numpy as np
import pytest

from foilmap import load_section
from foilmap.section.evaluation import evaluate
from foilmap.run.single import execute_run
from foilmap.store.folder import StudyFolder
from foilmap.store.runlog import read_run
from foilmap.store.studyfile import load_study_text

ROOT = Path(__file__).resolve().parents[1]

STUDY = """
# test study (invented data)
[study]
name = "t"
seeds = [3, 4]
[shape]
coefficients = 4
te_angle_deg = [6.0, 12.0]
[[point]]
name = "p"
cl = 0.5
cl_range = [0.4, 0.6]
[objectives]
peak_suction = 1.0
severity = 0.1
[constraints]
thickness = [0.10, 1.0]
min_le_radius = 0.006
cm = [-0.12, 0.0]
station_thickness = [[0.9, 0.015]]
[search]
max_evaluations = 400
restarts = 1
"""

REPRODUCIBLE = ("evals/x", "evals/f", "evals/objectives", "evals/constraints", "evals/status",
                "evals/generation", "gen/evaluations", "gen/restart", "gen/popsize", "gen/sigma",
                "gen/mean", "gen/best_f", "gen/best_index", "gen/feasible_fraction",
                "gen/hypervolume", "gen/front_offset", "gen/front_size")


def logs_equal(a: Path, b: Path) -> None:
    la, lb = read_run(a), read_run(b)
    for name in REPRODUCIBLE:
        grp, key = name.split("/")
        xa, xb = getattr(la, grp)[key], getattr(lb, grp)[key]
        assert xa.shape == xb.shape, name
        assert np.array_equal(xa, xb, equal_nan=True), name  # bit for bit
    assert np.array_equal(la.front_index, lb.front_index)


def one_run(tmp_path, name, budget=None, text=STUDY):
    study = load_study_text(text)
    out = tmp_path / name
    _, study = StudyFolder.prepare(study, out, budget)
    run = study.runs()[0]
    execute_run(study, run, out)
    return out / "runs" / f"{run.run_id}.h5"


def test_same_seed_gives_the_same_bits(tmp_path):
    a = one_run(tmp_path, "a")
    np.random.seed(12345)  # the global generator must not matter
    np.random.standard_normal(1000)
    b = one_run(tmp_path, "b")
    logs_equal(a, b)
    log = read_run(a)
    assert log.state_name == "complete" and log.evaluations >= 400
    assert log.best() is not None


def _steps(monkeypatch):
    """Count the generations a run steps (the search's step, wrapped)."""
    import foilmap.design.search as search

    calls = []
    original = search.step

    def counted(state, problem, options):
        calls.append(1)
        return original(state, problem, options)

    monkeypatch.setattr(search, "step", counted)
    return calls


@pytest.mark.parametrize("cut", [1, 7])
def test_a_stopped_run_resumes_to_the_same_bits_in_process(tmp_path, monkeypatch, cut):
    # the quick, in-process form of the kill-and-resume tests below: a run asked to stop
    # after `cut` generations (what SIGINT and SIGTERM do to a worker) commits and exits 143;
    # run again, it goes on from its checkpoint -- only the remaining generations are
    # stepped -- and its log is bit for bit the uninterrupted run's
    ref = one_run(tmp_path, "ref")
    total = read_run(ref).generations
    study = load_study_text(STUDY)
    out = tmp_path / "cut"
    _, study = StudyFolder.prepare(study, out, None)
    run = study.runs()[0]
    calls = _steps(monkeypatch)
    with pytest.raises(SystemExit) as stop:
        execute_run(study, run, out, should_stop=lambda: len(calls) >= cut)
    assert stop.value.code == 143
    log_path = out / "runs" / f"{run.run_id}.h5"
    part = read_run(log_path)
    assert part.state_name != "complete" and part.generations == cut
    assert StudyFolder(out).checkpoint_path(run.run_id).exists()
    calls.clear()
    summary = execute_run(study, run, out)
    assert summary["state"] == "complete"
    assert len(calls) == total - cut  # resumed from its state, not started again
    logs_equal(ref, log_path)
    done = read_run(log_path)
    assert done.resumes == 1 and done.generations == total
    assert not StudyFolder(out).checkpoint_path(run.run_id).exists()
    calls.clear()
    execute_run(study, run, out)  # a complete run is skipped
    assert calls == []


def test_a_log_ahead_of_its_checkpoint_resumes_from_the_checkpoint(tmp_path, monkeypatch):
    # what SIGKILL leaves between a commit's rows and its checkpoint, made in-process: the log
    # holds 7 generations, the checkpoint is the one of generation 3.  The resume cuts the log
    # back to 3 and steps the rest: the uninterrupted run's bits, no generation twice
    import shutil

    ref = one_run(tmp_path, "ref")
    total = read_run(ref).generations
    study = load_study_text(STUDY)
    out = tmp_path / "cut"
    _, study = StudyFolder.prepare(study, out, None)
    run = study.runs()[0]
    ckpt = StudyFolder(out).checkpoint_path(run.run_id)
    log_path = out / "runs" / f"{run.run_id}.h5"
    calls = _steps(monkeypatch)
    with pytest.raises(SystemExit):
        execute_run(study, run, out, should_stop=lambda: len(calls) >= 3)
    shutil.copy2(ckpt, tmp_path / "gen3.resume")
    with pytest.raises(SystemExit):
        execute_run(study, run, out, should_stop=lambda: len(calls) >= 7)
    assert read_run(log_path).generations == 7
    shutil.copy2(tmp_path / "gen3.resume", ckpt)  # the checkpoint four generations behind
    calls.clear()
    execute_run(study, run, out)
    assert len(calls) == total - 3
    logs_equal(ref, log_path)
    assert read_run(log_path).resumes == 2
    with h5py.File(log_path, "r") as f:  # a reopened log keeps the documented one-byte state
        assert f["meta/state"].dtype == np.int8 and f["meta/state"][0] == 1


def test_different_seeds_differ(tmp_path):
    a = one_run(tmp_path, "a")
    b = one_run(tmp_path, "b", text=STUDY.replace("seeds = [3, 4]", "seeds = [5]"))
    assert not np.array_equal(read_run(a).evals["x"][:20], read_run(b).evals["x"][:20])


def test_log_schema_is_documented_and_complete(tmp_path):
    path = one_run(tmp_path, "a")
    doc = (ROOT / "docs" / "run-log.md").read_text()
    documented_ds = set(re.findall(r"^\| `([a-z_]+(?:/[a-z_]+)?)` \| \(|^\| `(study_text)`", doc,
                                   flags=re.M))
    documented_ds = {d[0] or d[1] for d in documented_ds}
    documented_attrs = set(re.findall(r"^\| `([a-z_]+)` \| (?:string|integer|JSON)", doc, flags=re.M))
    found = set()
    with h5py.File(path, "r") as f:
        f.visititems(lambda name, obj: found.add(name) if isinstance(obj, h5py.Dataset) else None)
        attrs = set(f.attrs)
        assert f.attrs["schema_version"] == "1.1"
        assert f["evals/x"].compression == "gzip" and f["evals/x"].shuffle
        assert f["evals/x"].dtype == np.float64  # search vectors to the last bit
        assert f["meta/state"].dtype == np.int8  # the one-byte state (docs/run-log.md)
        assert f["evals/x"].chunks[0] == f.attrs["chunk_rows"]
        study_text = f["study_text"].asstr()[()]
    assert found == documented_ds, (found ^ documented_ds)
    assert attrs == documented_attrs, (attrs ^ documented_attrs)
    assert study_text == STUDY
    log = read_run(path)
    for k in ("x", "f", "objectives", "constraints", "status", "generation"):
        assert log.evals[k].shape[0] == log.evaluations
    assert log.evals["constraints"].shape[1] == len(log.constraint_names) == 5
    assert json.loads(log.attrs["point"])["cl"] == 0.5


def test_best_design_meets_its_constraints_from_the_section_file(tmp_path):
    path = one_run(tmp_path, "a")
    out = path.parents[1]
    sec_file = tmp_path / "best.toml"
    r = subprocess.run([sys.executable, "-m", "foilmap.cli", "best", str(out), "-o",
                        str(sec_file)], capture_output=True, text=True, timeout=120)
    assert r.returncode == 0, r.stderr
    rec = load_section(sec_file)
    ev = evaluate(rec.to_set(), cl=0.5, proxies=("severity",))
    assert ev.status[0] == 0
    assert ev.thickness[0] >= 0.10 - 1e-9
    assert ev.le_radius[0] >= 0.006 - 1e-9
    assert -0.12 - 1e-9 <= ev.cm_quarter_chord[0] <= 1e-9
    best = read_run(path).best()
    peak = max(-evaluate(rec.to_set(), cl=c).cp_min[0] for c in (0.5, 0.4, 0.6))
    assert peak == pytest.approx(best["objectives"][0], rel=1e-9)
    assert rec.provenance["evaluation"] == best["index"]


# --- real processes: kill, terminate, live status ----------------------------------------------

# long enough to be cut after 40 generations (about 600 in all), short enough for the suite
SLOW = STUDY.replace("max_evaluations = 400", "max_evaluations = 6000").replace(
    "seeds = [3, 4]", "seeds = [3]")


def start_run(study_file: Path, out: Path) -> subprocess.Popen:
    return subprocess.Popen(
        [sys.executable, "-m", "foilmap.cli", "run", str(study_file), "--out", str(out),
         "--workers", "1"], stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True,
        start_new_session=True)


def wait_for_generations(log: Path, n: int, proc, timeout=90.0) -> int:
    t0 = time.time()
    while time.time() - t0 < timeout:
        assert proc.poll() is None, "the run ended before it could be interrupted"
        if log.exists():
            try:
                g = read_run(log).generations
                if g >= n:
                    return g
            except Exception:
                pass
        time.sleep(0.05)
    raise AssertionError("no progress")


@pytest.mark.slow
@pytest.mark.parametrize("sig", [signal.SIGKILL, signal.SIGTERM])
def test_killed_run_resumes_to_identical_log(tmp_path, tmp_path_factory, sig):
    from conftest import reference_folder

    study_file, ref = reference_folder(tmp_path_factory, SLOW)
    out = tmp_path / "cut"
    proc = start_run(study_file, out)
    log = out / "runs" / "p.s3.h5"
    seen = wait_for_generations(log, 40, proc)
    # the run is frozen while a live reader looks at it, so that the signal below always lands
    # mid-run (on a loaded machine it could otherwise finish while status starts)
    os.killpg(proc.pid, signal.SIGSTOP)
    st = subprocess.run([sys.executable, "-m", "foilmap.cli", "status", str(out), "--json"],
                        capture_output=True, text=True, timeout=60)
    assert st.returncode == 0, st.stderr
    row = json.loads(st.stdout)["runs"][0]
    assert row["state"] in ("running", "unfinished") and row["generations"] >= seen
    os.killpg(proc.pid, sig)
    try:
        os.killpg(proc.pid, signal.SIGCONT)  # a stopped process takes SIGTERM on waking
    except ProcessLookupError:  # (SIGKILL: the group is gone)
        pass
    proc.wait(timeout=60)
    cut = read_run(log)
    assert cut.state_name != "complete" and 0 < cut.generations
    r = subprocess.run([sys.executable, "-m", "foilmap.cli", "resume", str(out)],
                       capture_output=True, text=True, timeout=300)
    assert r.returncode == 0, r.stderr
    logs_equal(ref / "runs" / "p.s3.h5", log)
    done = read_run(log)
    assert done.state_name == "complete" and done.resumes == 1
    assert not (out / "runs" / "p.s3.resume").exists()
    index = json.loads((out / "index.json").read_text())
    assert index["runs"][0]["state"] == "complete"


@pytest.mark.slow
def test_rerunning_a_complete_study_skips_its_runs(tmp_path):
    study_file = tmp_path / "s.toml"
    study_file.write_text(STUDY)
    out = tmp_path / "o"
    args = [sys.executable, "-m", "foilmap.cli", "run", str(study_file), "--out", str(out)]
    r = subprocess.run(args, capture_output=True, text=True, timeout=300)
    assert r.returncode == 0, r.stderr
    assert "2 runs finished now" in r.stdout
    before = {p: p.stat().st_mtime_ns for p in (out / "runs").glob("*.h5")}
    r = subprocess.run(args, capture_output=True, text=True, timeout=300)
    assert r.returncode == 0 and "0 runs finished now" in r.stdout
    assert before == {p: p.stat().st_mtime_ns for p in (out / "runs").glob("*.h5")}
    st = subprocess.run([sys.executable, "-m", "foilmap.cli", "status", str(out)],
                        capture_output=True, text=True, timeout=60)
    assert "2 complete" in st.stdout
    png = tmp_path / "conv.png"
    r = subprocess.run([sys.executable, "-m", "foilmap.cli", "plot-run", str(out), "-o", str(png)],
                       capture_output=True, text=True, timeout=120)
    assert r.returncode == 0, r.stderr
    assert png.read_bytes()[:4] == b"\x89PNG"


@pytest.mark.parametrize("args,message", [
    (["run", "{bad}"], "shape.coefficients = 99 is not allowed"),
    (["run", "{good}", "--workers", "0"], "workers 0 is out of range"),
    (["run", "{good}", "--budget", "3"], "budget 3 is out of range"),
    (["status", "{tmp}"], "is not a study folder"),
    (["resume", "{tmp}"], "is not a study folder"),
    (["best", "{tmp}", "-o", "{tmp}/x.toml"], "is not a study folder"),
])
def test_bad_study_input_writes_nothing(tmp_path, args, message):
    good = tmp_path / "good.toml"
    good.write_text(STUDY)
    bad = tmp_path / "bad.toml"
    bad.write_text(STUDY.replace("coefficients = 4", "coefficients = 99"))
    before = set(tmp_path.iterdir())
    r = subprocess.run([sys.executable, "-m", "foilmap.cli",
                        *[a.format(bad=bad, good=good, tmp=tmp_path) for a in args]],
                       capture_output=True, text=True, timeout=60, cwd=tmp_path)
    assert r.returncode == 2
    assert len(r.stderr.strip().splitlines()) == 1 and message in r.stderr
    assert set(tmp_path.iterdir()) == before  # nothing written, no results/ folder


@pytest.mark.slow
def test_a_budget_set_on_the_study_reaches_the_workers(tmp_path):
    # regression: workers re-read the study text, which keeps its own budget
    from foilmap.run.local import drive_study

    st = load_study_text(STUDY).with_budget(60)
    summ = drive_study(st, tmp_path / "b", workers=1)
    assert all(60 <= s["evaluations"] < 60 + 20 for s in summ)


def test_a_study_without_constraints_runs(tmp_path):
    # regression: a width-0 constraints table could not be created in the run log, so the
    # simplest study failed in every run
    text = """
# test study (invented data)
[study]
name = "simple"
seeds = [1]
[[point]]
name = "p"
cl = 0.5
[objectives]
peak_suction = 1.0
[search]
max_evaluations = 120
"""
    path = one_run(tmp_path, "a", text=text)
    log = read_run(path)
    assert log.state_name == "complete" and log.constraint_names == []
    assert log.evals["constraints"].shape == (log.evaluations, 0)
    assert log.best() is not None


# 200 generations a run: each of eight interrupts comes right after the first commit of the
# driver it stops (a run commits its first generation at once), so each costs the run a few
# generations (2 to 8 on this machine, 23 to 44 for all eight); the last resume does the rest
INTERRUPTED = STUDY.replace("max_evaluations = 400", "max_evaluations = 2000")


def wait_for_own_generations(log: Path, n: int, proc, timeout=120.0) -> None:
    """Wait until the log holds ``n`` generations, polled without HDF5's file lock (a poll that
    held it while a resume reopens the log would make that run fail: faultkit.generations)."""
    from faultkit import generations

    t0 = time.time()
    while time.time() - t0 < timeout:
        if proc.poll() is not None:
            _, err = proc.communicate()
            raise AssertionError(f"the driver ended (exit {proc.returncode}) before it could be "
                                 f"interrupted: {err}")
        if generations(log) >= n:
            return
        time.sleep(0.05)
    raise AssertionError("no progress")


@pytest.mark.slow
def test_interrupts_commit_every_run_and_resume_identically(tmp_path, tmp_path_factory):
    # Ctrl-C (SIGINT) and SIGTERM, eight times in all: to the process group, as a terminal's
    # Ctrl-C sends it, and to the driver alone, as a batch scheduler or a kill does (each
    # signal both ways, in turn).  Every time the driver exits 130 or 143 within seconds with one
    # line; the moment it has gone so have its workers and the runs' locks are free (a resume
    # typed at once never meets one); no process of the group is left behind; the unfinished
    # runs are marked interrupted.  The interrupts come one after another on one folder (the
    # first to `run` once p.s3 has a generation, the next seven to the `resume` that
    # continues it, each once that driver has committed generations of its own); the last
    # resume finishes the study bit-identically, with no run restarted from its seed (each
    # interrupt committed consistently).  One study's work in all, not eight.
    from conftest import reference_folder
    from faultkit import check_driver_gone, workers_of

    study_file, ref = reference_folder(tmp_path_factory, INTERRUPTED)
    out = tmp_path / "cut"
    log = out / "runs" / "p.s3.h5"
    runs = ("p.s3", "p.s4")
    for k in range(8):
        sig = signal.SIGINT if k % 2 == 0 else signal.SIGTERM
        group = k % 4 < 2  # group: SIGINT, SIGTERM; driver alone: SIGINT, SIGTERM; ...
        args = ["run", str(study_file), "--out", str(out)] if k == 0 else ["resume", str(out)]
        base = read_run(log).generations if k else 0
        proc = subprocess.Popen([sys.executable, "-m", "foilmap.cli", *args, "--workers", "2"],
                                stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True,
                                start_new_session=True)
        wait_for_own_generations(log, base + 1, proc)
        workers = workers_of(proc.pid)
        t0 = time.time()
        if group:
            os.killpg(proc.pid, sig)
        else:
            os.kill(proc.pid, sig)
        _, err = proc.communicate(timeout=60)
        check_driver_gone(workers, out, runs)
        assert time.time() - t0 < 25, "the driver took too long to stop"
        assert proc.returncode == (130 if sig == signal.SIGINT else 143), err
        lines = [line for line in err.splitlines() if line.startswith("foilmap:")]
        assert len(lines) == 1 and "resume" in lines[0] and "Traceback" not in err, err
        assert "restarts from its seed" not in err, err
        # no process of the group is left behind for long: multiprocessing's resource tracker
        # leaves once it has read the driver's end
        deadline = time.time() + 5.0
        while True:
            left = subprocess.run(["ps", "-o", "pid=,stat=", "-g", str(proc.pid)],
                                  capture_output=True, text=True).stdout.split("\n")
            alive_rows = [row for row in left if row.strip() and not row.split()[1].startswith("Z")]
            if not alive_rows or time.time() > deadline:
                break
            time.sleep(0.1)
        assert not alive_rows, f"processes left behind: {alive_rows}"  # (zombies await reaping)
        index = json.loads((out / "index.json").read_text())
        states = {row["run"]: row["state"] for row in index["runs"]}
        assert "interrupted" in states.values(), states
        assert set(states.values()) <= {"interrupted", "complete", "pending"}, states
        cut = read_run(log)
        assert cut.state_name != "complete" and cut.generations > base
    r = subprocess.run([sys.executable, "-m", "foilmap.cli", "resume", str(out), "--workers", "2"],
                       capture_output=True, text=True, timeout=600)
    assert r.returncode == 0, r.stderr
    assert "restarts from its seed" not in r.stderr, r.stderr
    for run_id in runs:
        logs_equal(ref / "runs" / f"{run_id}.h5", out / "runs" / f"{run_id}.h5")
        assert read_run(out / "runs" / f"{run_id}.h5").state_name == "complete"
    assert read_run(log).resumes == 8  # p.s3 was cut by every interrupt, resumed each time


def test_a_study_with_no_feasible_design_says_so(tmp_path):
    # an impossible thickness: every run ends without a feasible design; the run says so and
    # plot-run refuses in one line rather than drawing an empty figure (invented study)
    from conftest import cli, small_study

    study = tmp_path / "s.toml"
    study.write_text(small_study("none", [1], 120, constraints="thickness = [0.6, 1.0]"))
    r = cli("run", study, "--out", tmp_path / "out", "--workers", "1")
    assert r.returncode == 0, r.stderr
    assert "no run of study none found a feasible design" in r.stdout
    r = cli("plot-run", tmp_path / "out", "-o", tmp_path / "c.png")
    assert r.returncode == 2 and "no run of study 'none' has a feasible design" in r.stderr
    assert not (tmp_path / "c.png").exists()


def test_workers_get_the_validated_study_not_its_text(tmp_path):
    # the study's start file is read (and fitted) once, when the study is loaded: the workers
    # receive the study object, so removing the file afterwards changes nothing (before, every
    # worker parsed the text again and fitted the file again)
    from conftest import SECTION_TEXT, small_study

    from foilmap.run.local import drive_study

    (tmp_path / "start.toml").write_text(SECTION_TEXT)
    text = small_study("fromfile", [1, 2], 150).replace(
        "coefficients = 4", 'coefficients = 4\nstart = "start.toml"')
    (tmp_path / "s.toml").write_text(text)
    from foilmap import load_study

    study = load_study(tmp_path / "s.toml")
    (tmp_path / "start.toml").unlink()
    summaries = drive_study(study, tmp_path / "out", workers=2)
    assert [s["state"] for s in summaries] == ["complete", "complete"]
