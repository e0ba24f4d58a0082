"""foilmap.run.single, one run in this process: a complete run is skipped when run again; a run
asked to stop commits, exits 143 and resumes to the uninterrupted run's bits; recover() reads
what a folder holds (a log ahead of its checkpoint, a checkpoint of another run or generation,
a damaged or missing file) and says in one line what it does; the log's variable names; the
worker's retries; which errors are a full or read-only disk.  Tiny studies in tmp folders."""

from __future__ import annotations

import errno
import json
import shutil

import pytest
from conftest import small_study
from test_search import logs_equal

from foilmap.design.problem import Problem
from foilmap.run import single
from foilmap.run.single import (
    RUN_ATTEMPTS,
    _variable_names,
    disk_problem,
    execute_run,
    recover,
    worker,
)
from foilmap.store.folder import StudyFolder
from foilmap.store.lock import Busy, Lock
from foilmap.store.runlog import read_checkpoint_info, read_run, save_checkpoint
from foilmap.store.studyfile import load_study_text

#: about a dozen generations of ten evaluations: enough to stop in the middle, quick to run
EVALS = 120


def prepared(tmp_path, name: str = "out", text: str | None = None):
    st = load_study_text(text or small_study("single", [1, 2], EVALS))
    folder, st = StudyFolder.prepare(st, tmp_path / name, None)
    return st, st.runs()[0], folder


@pytest.fixture(scope="module")
def ref(tmp_path_factory):
    """The uninterrupted run p.s1: its log and its summary."""
    st, run, folder = prepared(tmp_path_factory.mktemp("ref"))
    summary = execute_run(st, run, folder.path)
    return folder.log_path(run.run_id), summary


@pytest.fixture
def steps(monkeypatch):
    """The generations a run steps (the search's step, counted)."""
    import foilmap.design.search as search

    calls = []
    original = search.step

    def counted(state, problem, options):
        calls.append(state.generation)
        return original(state, problem, options)

    monkeypatch.setattr(search, "step", counted)
    return calls


def stop_after(calls, n: int):
    return lambda: len(calls) >= n


def free(folder: StudyFolder, run_id: str) -> bool:
    lock = Lock(folder.log_path(run_id).with_suffix(".lock"), "test")
    if not lock.try_acquire():
        return False
    lock.release()
    return True


# --- execute_run -------------------------------------------------------------------------------


def test_a_run_completes_and_run_again_is_skipped(tmp_path, ref, steps):
    ref_log, ref_summary = ref
    st, run, folder = prepared(tmp_path)
    summary = execute_run(st, run, folder.path)
    log_path, ckpt = folder.log_path(run.run_id), folder.checkpoint_path(run.run_id)
    log = read_run(log_path)
    assert summary["state"] == "complete" and log.state_name == "complete"
    assert summary["run"] == "p.s1" and summary["evaluations"] == log.evaluations >= EVALS
    assert summary["generations"] == log.generations == len(steps) > 3
    assert log.resumes == 0 and "notes" not in summary
    assert not ckpt.exists()  # a complete run keeps no checkpoint
    assert free(folder, run.run_id)  # its lock went with it
    logs_equal(ref_log, log_path)  # the same seed in another folder: the same bits
    assert {k: v for k, v in summary.items() if k != "elapsed_s"} == {
        k: v for k, v in ref_summary.items() if k != "elapsed_s"}
    # run again: nothing is stepped or written, a stale checkpoint is removed
    before = log_path.read_bytes()
    ckpt.write_bytes(b"stale")
    steps.clear()
    assert execute_run(st, run, folder.path) == summary
    assert steps == [] and log_path.read_bytes() == before and not ckpt.exists()


@pytest.mark.parametrize("cut", [1, 5])
def test_a_stopped_run_commits_exits_143_and_resumes_to_the_same_bits(tmp_path, ref, steps,
                                                                       monkeypatch, cut):
    # no periodic commit: what the stopped run leaves is the commit that the stop itself makes
    monkeypatch.setattr(single, "COMMIT_INTERVAL", 1e9)
    ref_log, ref_summary = ref
    total = ref_summary["generations"]
    st, run, folder = prepared(tmp_path)
    log_path, ckpt = folder.log_path(run.run_id), folder.checkpoint_path(run.run_id)
    with pytest.raises(SystemExit) as stop:
        execute_run(st, run, folder.path, should_stop=stop_after(steps, cut))
    assert stop.value.code == 143
    assert len(steps) == cut  # stopped at the end of the generation that was asked to stop
    part = read_run(log_path)
    assert part.state_name != "complete" and part.generations == cut
    info = read_checkpoint_info(ckpt)
    assert (info["run"], info["generation"], info["evaluations"]) == (
        "p.s1", cut, part.evaluations)
    assert free(folder, run.run_id)  # the lock is released on the way out
    state, g, _, note = recover(log_path, ckpt, run.run_id)
    assert (g, note, state.generation) == (cut, None, cut)
    steps.clear()
    reports = []
    summary = execute_run(st, run, folder.path, report=reports.append)
    assert steps == list(range(cut, total))  # only the remaining generations, in order
    logs_equal(ref_log, log_path)
    done = read_run(log_path)
    assert done.state_name == "complete" and done.resumes == 1 and not ckpt.exists()
    assert summary["state"] == "complete" and summary["resumes"] == 1
    assert reports and reports[-1]["generation"] == total and reports[-1]["run"] == "p.s1"
    assert "note" not in reports[0]  # nothing was amiss


def test_commits_come_every_commit_interval(tmp_path, ref, steps, monkeypatch):
    # COMMIT_INTERVAL 0: a commit (and a progress report) after every generation
    monkeypatch.setattr(single, "COMMIT_INTERVAL", 0.0)
    st, run, folder = prepared(tmp_path)
    reports = []
    execute_run(st, run, folder.path, report=reports.append)
    assert [r["generation"] for r in reports] == list(range(1, ref[1]["generations"] + 1))
    assert [r["evaluations"] for r in reports] == list(
        read_run(folder.log_path(run.run_id)).gen["evaluations"])


def test_a_run_another_process_holds_is_refused_and_left_alone(tmp_path, steps):
    st, run, folder = prepared(tmp_path)
    folder.log_path(run.run_id).parent.mkdir(parents=True, exist_ok=True)
    holder = Lock(folder.log_path(run.run_id).with_suffix(".lock"), "another writer").acquire()
    try:
        with pytest.raises(Busy, match="another writer"):
            execute_run(st, run, folder.path, lock_wait=0.2)  # (RUN_LOCK_WAIT, 30 s, by default)
    finally:
        holder.release()
    assert steps == [] and not folder.log_path(run.run_id).exists()


def test_the_log_names_the_search_variables(tmp_path):
    st, run, folder = prepared(tmp_path)
    problem = Problem.from_run(st, run)
    names = _variable_names(problem)
    assert names == ["re_A1", "im_A1", "re_A2", "im_A2", "re_A3", "im_A3", "re_A4", "im_A4",
                     "te_angle_unit"]  # the trailing-edge angle varies: [6, 14] by default
    assert len(names) == problem.param.dimension
    sym = load_study_text(small_study("sym", [1], EVALS).replace(
        "coefficients = 4", "coefficients = 3\nsymmetric = true\nte_angle_deg = 10.0"))
    p = Problem.from_run(sym, sym.runs()[0])
    assert _variable_names(p) == ["re_A1", "re_A2", "re_A3"] and p.param.dimension == 3
    # the names the log keeps are these
    execute_run(st, run, folder.path)
    attrs = read_run(folder.log_path(run.run_id)).attrs
    assert json.loads(attrs["variable_names"]) == names


# --- recover -----------------------------------------------------------------------------------


@pytest.fixture
def cut_run(tmp_path, steps):
    """A run stopped at generation 3 (its checkpoint kept aside), then at generation 7."""
    st, run, folder = prepared(tmp_path)
    ckpt = folder.checkpoint_path(run.run_id)
    with pytest.raises(SystemExit):
        execute_run(st, run, folder.path, should_stop=stop_after(steps, 3))
    shutil.copy2(ckpt, tmp_path / "gen3.resume")
    shutil.copy2(folder.log_path(run.run_id), tmp_path / "gen3.h5")
    with pytest.raises(SystemExit):
        execute_run(st, run, folder.path, should_stop=stop_after(steps, 7))
    steps.clear()
    return st, run, folder, tmp_path


def test_recover_a_new_run_and_a_log_ahead_of_its_checkpoint(tmp_path, cut_run):
    st, run, folder, keep = cut_run
    assert recover(tmp_path / "none.h5", tmp_path / "none.resume", "p.s1") == (None, 0, None,
                                                                               None)
    log, ckpt = folder.log_path("p.s1"), folder.checkpoint_path("p.s1")
    state, g, old, note = recover(log, ckpt, "p.s1")
    assert (state.generation, g, old.generations, note) == (7, 7, 7, None)
    # what SIGKILL leaves between a commit's rows and its checkpoint: the log 4 generations
    # ahead; the run continues from the checkpoint, the log cut back to it (not a repair)
    shutil.copy2(keep / "gen3.resume", ckpt)
    state, g, old, note = recover(log, ckpt, "p.s1")
    assert (state.generation, g, old.generations, note) == (3, 3, 7, None)


def _restarted(recovered, *words, run_id="p.s1"):
    state, g, _, note = recovered
    assert state is None and g == 0
    assert note.startswith(f"run {run_id}: ") and len(note.splitlines()) == 1, note
    assert note.endswith("restarts from its seed") or "recomputes its" in note, note
    for w in words:
        assert w in note, (w, note)
    return note


def test_recover_restarts_from_the_seed_when_the_files_disagree(tmp_path, cut_run):
    st, run, folder, keep = cut_run
    log, ckpt = folder.log_path("p.s1"), folder.checkpoint_path("p.s1")
    good = ckpt.read_bytes()
    state, _, _, _ = recover(log, ckpt, "p.s1")
    info = read_checkpoint_info(ckpt)

    # a checkpoint of another run
    _restarted(recover(log, ckpt, "p.s2"), "belongs to run 'p.s1'", "rolled back to generation 0",
               run_id="p.s2")
    # a header that names another generation than its state's
    save_checkpoint(ckpt, state, {**info, "generation": 6})
    _restarted(recover(log, ckpt, "p.s1"), "holds another generation than its header")
    # the rows of its generation are not the ones the log holds (another writer's log)
    save_checkpoint(ckpt, state, {**info, "digest": "00" * 32})
    _restarted(recover(log, ckpt, "p.s1"), "disagree at generation 7")
    save_checkpoint(ckpt, state, {**info, "evaluations": info["evaluations"] - 1})
    _restarted(recover(log, ckpt, "p.s1"), "disagree at generation 7")
    # a checkpoint ahead of its log
    ckpt.write_bytes(good)
    shutil.copy2(keep / "gen3.h5", tmp_path / "short.h5")
    _restarted(recover(tmp_path / "short.h5", ckpt, "p.s1"),
               "checkpoint at generation 7 but the log holds only 3 readable generations")
    # a damaged checkpoint: its generations are recomputed from the seed
    ckpt.write_bytes(good[: len(good) // 2])
    _restarted(recover(log, ckpt, "p.s1"), "recomputes its 7 logged generations",
               "could not continue it bit-identically")
    # no checkpoint beside a log that has generations
    ckpt.unlink()
    _restarted(recover(log, ckpt, "p.s1"), "recomputes its 7 logged generations")
    # a checkpoint without its log
    ckpt.write_bytes(good)
    _restarted(recover(tmp_path / "gone.h5", ckpt, "p.s1"),
               "log gone.h5 is missing (checkpoint at generation 7)")


def test_recover_keeps_the_whole_generations_of_a_damaged_log(tmp_path, cut_run, monkeypatch):
    st, run, folder, _ = cut_run
    log, ckpt = folder.log_path("p.s1"), folder.checkpoint_path("p.s1")
    real = single.read_run

    def damaged_after_checkpoint(path, upto=None, settle=True):
        assert settle is False  # the lock's holder: nobody else is flushing this log
        if upto is None:
            raise OSError("rows past the last commit are cut")
        return real(path, upto=upto, settle=settle)

    monkeypatch.setattr(single, "read_run", damaged_after_checkpoint)
    state, g, old, note = recover(log, ckpt, "p.s1")
    assert (state.generation, g, old.generations) == (7, 7, 7)
    assert note == ("run p.s1: log p.s1.h5 is damaged after generation 7 (OSError: rows past "
                    "the last commit are cut); keeps its 7 whole generations and continues "
                    "from the checkpoint")

    def damaged_throughout(path, upto=None, settle=True):
        raise OSError("unreadable")

    monkeypatch.setattr(single, "read_run", damaged_throughout)
    state, g, old, note = recover(log, ckpt, "p.s1")
    assert (state, g, old) == (None, 0, None)
    assert note == "run p.s1: log p.s1.h5 is damaged (OSError: unreadable); restarts from its seed"
    ckpt.unlink()
    _, _, _, note = recover(log, ckpt, "p.s1")
    assert note.startswith("run p.s1: log p.s1.h5 is damaged (OSError: unreadable) and ")


def test_a_repaired_run_says_so_and_still_gives_the_same_bits(tmp_path, ref, cut_run, steps):
    ref_log, ref_summary = ref
    st, run, folder, _ = cut_run
    save_checkpoint(folder.checkpoint_path("p.s1"), None, {"run": "p.s9", "generation": 7})
    reports = []
    summary = execute_run(st, run, folder.path, report=reports.append)
    assert reports[0]["run"] == "p.s1" and "belongs to run 'p.s9'" in reports[0]["note"]
    assert summary["notes"] == [reports[0]["note"]]
    assert len(steps) == ref_summary["generations"]  # restarted from the seed: every generation
    logs_equal(ref_log, folder.log_path("p.s1"))
    assert read_run(folder.log_path("p.s1")).resumes == 2  # the log's own count goes on


# --- worker and disk errors ----------------------------------------------------------------------


@pytest.mark.parametrize("exc,attempts,error", [
    (RuntimeError("solver fell over"), RUN_ATTEMPTS, "RuntimeError: solver fell over"),
    (OSError(errno.ENOSPC, "No space left on device"), 1,
     "no space left on device; free space or make the folder writable, then foilmap resume"),
    (Busy("run p.s1 is in use by pid 1", None), 1, "run p.s1 is in use by pid 1"),
])
def test_a_failing_run_is_retried_then_recorded(tmp_path, monkeypatch, exc, attempts, error):
    st, run, folder = prepared(tmp_path)
    calls = []

    def failing(*args, **kwargs):
        calls.append(args[1].run_id)
        raise exc

    monkeypatch.setattr(single, "execute_run", failing)
    out = worker(st, "p.s2", str(folder.path))
    assert calls == ["p.s2"] * attempts  # a full disk or a held run: no retry
    assert out == {"run": "p.s2", "state": "failed", "error": error, "attempts": RUN_ATTEMPTS}


def test_a_worker_returns_the_run_summary_or_interrupted(tmp_path, monkeypatch):
    st, run, folder = prepared(tmp_path)
    seen = []

    def fine(study, run, out, report, stop):
        seen.append((run.run_id, out, report, stop))
        return {"run": run.run_id, "state": "complete"}

    monkeypatch.setattr(single, "execute_run", fine)
    assert worker(st, "p.s2", str(folder.path)) == {"run": "p.s2", "state": "complete"}
    assert seen == [("p.s2", folder.path, None, None)]  # no queue, no Dask: nothing to ask

    def stopped(*args):
        raise SystemExit(143)

    monkeypatch.setattr(single, "execute_run", stopped)
    assert worker(st, "p.s1", str(folder.path)) == {"run": "p.s1", "state": "interrupted"}


@pytest.mark.parametrize("exc,reason", [
    (OSError(errno.ENOSPC, "No space left on device"), "no space left on device"),
    (OSError(errno.EDQUOT, "Disk quota exceeded"), "disk quota exceeded"),
    (OSError(errno.EROFS, "Read-only file system"), "read-only file system"),
    (PermissionError(errno.EROFS, "x"), "read-only file system"),  # by its number, not its text
    # HDF5 gives the reason in its text only
    (RuntimeError("Can't write data (file write failed: errno = 28, error message = 'No space "
                  "left on device')"), "no space left on device"),
    (OSError("Unable to create file (Read-only file system)"), "read-only file system"),
    (OSError(errno.ENOENT, "No such file or directory"), None),
    (OSError(errno.EACCES, "Permission denied"), None),
    (ValueError("space left on the device: 3 GB"), None),
])
def test_which_errors_are_a_disk_refusing_writes(exc, reason):
    assert disk_problem(exc) == reason


LEAN = """
import sys
from foilmap.run.single import init_worker
init_worker(None)  # a pool worker's set-up, without a queue or a driver to watch
import cma
held = [m for m in ("scipy.stats", "matplotlib", "matplotlib.pyplot") if m in sys.modules]
es = cma.CMAEvolutionStrategy([0.3, -0.2, 0.1], 0.5, {"seed": 4, "verbose": -9})
es.optimize(lambda x: sum(v * v for v in x), iterations=60)
import matplotlib.pyplot, scipy.stats  # as usual once cma is in
print(held, es.result.fbest < 1e-6, round(scipy.stats.kendalltau([1, 2, 3], [1, 3, 2])[0], 6))
"""


def test_a_pool_worker_imports_cma_without_plotting_or_statistics():
    """cma pulls in pyplot and scipy.stats at import (1.3 s of every worker's start); a
    worker holds them back while cma imports, its search works, and both import as usual
    afterwards.  The caller's own process is never changed (test_side_effects)."""
    import subprocess
    import sys

    r = subprocess.run([sys.executable, "-c", LEAN], capture_output=True, text=True,
                       timeout=120)
    assert r.returncode == 0, r.stderr
    assert r.stdout.split() == ["[]", "True", "0.333333"]
    assert r.stderr == ""  # no warning from cma about its plots


def test_a_process_holding_an_unclosable_log_begins_no_other_run(tmp_path, monkeypatch):
    # after a full disk spoilt HDF5 in this process (a log it could not close), a run given to
    # it fails at once with the disk's line instead of meeting HDF5's own errors
    from foilmap.store import runlog

    st, run, folder = prepared(tmp_path)
    monkeypatch.setattr(runlog, "UNCLOSED", [(object(), (), "file write failed: errno = 28, "
                                              "error message = 'No space left on device'")])
    with pytest.raises(OSError, match="could not be closed after the disk refused a write"):
        execute_run(st, run, folder.path)
    assert not folder.log_path(run.run_id).exists()  # no log begun
    s = worker(st, run.run_id, str(folder.path))
    assert s["state"] == "failed" and s["error"].startswith("no space left on device; free space")
